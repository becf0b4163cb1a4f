"""recipe layer of phantomlab (see DESIGN.md)."""
