"""`lakefeed schedule` (not yet implemented)."""
