"""`lakefeed report` (not yet implemented)."""
