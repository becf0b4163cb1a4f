"""materials layer of phantomlab (see DESIGN.md)."""
