"""Make the corpus generator importable (tests run with importlib mode)."""

import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).parent))
