"""Make the recipe tests' synthetic-input helpers importable (tests run with importlib mode)."""

import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).parent))
