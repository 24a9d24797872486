"""`lakefeed zonal` (not yet implemented)."""
