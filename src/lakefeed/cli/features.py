"""`lakefeed features` (not yet implemented)."""
