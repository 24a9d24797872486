"""geometry stage (see DESIGN.md)."""
