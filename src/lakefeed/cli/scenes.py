"""`lakefeed scenes` (not yet implemented)."""
