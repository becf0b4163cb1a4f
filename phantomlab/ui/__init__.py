"""The Streamlit page of phantomlab (layer 5): input and output only, no physics.

``app.py`` calls :func:`phantomlab.ui.main.main`; each page is one module
(``design_page``, ``shelf_page``, ``batches_page``, ``refit_page``) with a ``show(workspace)``
function (the design page's fields in ``design_fields``, the calibration half of the fit page
in ``correct_section``); shared pieces live in ``widgets``, ``plots``, ``plan_view``,
``cautions``, ``services``, ``recording``, ``workspace`` and ``demo``.  Only this layer
imports streamlit.
"""
