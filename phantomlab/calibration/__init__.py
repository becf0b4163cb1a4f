"""calibration layer of phantomlab (see DESIGN.md)."""
