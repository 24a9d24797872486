"""`lakefeed sample` (not yet implemented)."""
