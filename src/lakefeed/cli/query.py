"""`lakefeed query` (not yet implemented)."""
