"""`lakefeed forecast` (not yet implemented)."""
