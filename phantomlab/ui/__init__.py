"""ui layer of phantomlab (see DESIGN.md)."""
