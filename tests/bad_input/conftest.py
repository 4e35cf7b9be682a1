"""Bad-input tests share the tiny workspace builder in ``tiny.py`` (importable from this folder)."""

from __future__ import annotations

import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
