"""Make the stand-in task functions importable by spawned worker processes."""

import sys
from pathlib import Path

HERE = str(Path(__file__).resolve().parent)
if HERE not in sys.path:
    sys.path.insert(0, HERE)  # spawned workers receive the parent's sys.path
