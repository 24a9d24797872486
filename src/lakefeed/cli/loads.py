"""`lakefeed loads` (not yet implemented)."""
