"""store layer of phantomlab (see DESIGN.md)."""
