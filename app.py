"""The phantomlab page: ``streamlit run app.py`` (``-- --db URL`` for a lab's own database).

Everything lives in :mod:`phantomlab.ui`; this file only starts it (layer 5, no physics).
"""

import sys

from phantomlab.ui.main import main

main(sys.argv[1:])
