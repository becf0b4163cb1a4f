"""transport layer of phantomlab (see docs/design.md)."""
