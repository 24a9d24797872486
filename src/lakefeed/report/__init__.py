"""report stage (see DESIGN.md)."""
