"""`lakefeed check` (not yet implemented)."""
