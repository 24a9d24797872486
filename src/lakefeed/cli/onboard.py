"""`lakefeed onboard` (not yet implemented)."""
