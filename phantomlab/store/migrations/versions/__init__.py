"""One module per schema revision, oldest first (``0001_...``, ``0002_...``)."""
