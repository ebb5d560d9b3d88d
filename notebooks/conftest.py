"""Let the notebook kernels started by nbval import ndtmap from this source tree (no install needed)."""

import os
from pathlib import Path

_ROOT = str(Path(__file__).resolve().parents[1])
_paths = [p for p in os.environ.get("PYTHONPATH", "").split(os.pathsep) if p]
if _ROOT not in _paths:
    os.environ["PYTHONPATH"] = os.pathsep.join([_ROOT, *_paths])
