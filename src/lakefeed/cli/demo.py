"""`lakefeed demo` (not yet implemented)."""
