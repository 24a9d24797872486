"""extract stage (see DESIGN.md)."""
