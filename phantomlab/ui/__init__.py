"""The Streamlit page of phantomlab (layer 5): input and output only, no physics.

``app.py`` calls :func:`phantomlab.ui.main.main`; each page is one module
(``design_page``, ``shelf_page``, ``batches_page``, ``refit_page``) with a ``show(workspace)``
function; shared pieces live in ``widgets``, ``plots``, ``cautions``, ``workspace`` and
``demo``.  Only this layer imports streamlit.
"""
