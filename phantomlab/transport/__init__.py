"""transport layer of phantomlab (see DESIGN.md)."""
