"""Gates: windows on the A-scan in which an echo is detected, timed and measured.

* :mod:`ndtmap.gates.gate`: the :class:`Gate` (window, detection level, mode,
  the gate it follows) and :func:`gate_chain`, the one resolver of follow chains;
* :mod:`ndtmap.gates.evaluate`: :func:`evaluate_gate` / :func:`evaluate_gates`
  on every A-scan of a grid (numpy or dask), windows in time;
* :mod:`ndtmap.gates.kernels`: the measurement along the time axis, the numpy
  reference and the compiled kernel (:mod:`ndtmap.gates._compiled`);
* :mod:`ndtmap.gates.timing`: echo timing on the envelope (the FIR Hilbert
  transformer the kernels use).
"""

from ndtmap.gates.evaluate import (
    evaluate_gate,
    evaluate_gates,
    gate_time_span_us,
    gate_window_us,
    is_immersion,
    timing_reach_samples,
)
from ndtmap.gates.gate import (
    DEFAULT_THRESHOLD_FSH,
    GATE_MODES,
    GATE_UNITS,
    LEVEL_REFERENCES,
    Gate,
    gate_chain,
    gate_table,
)
from ndtmap.gates.kernels import GATE_KERNELS, KERNEL_ENV

__all__ = [
    "GATE_UNITS",
    "GATE_MODES",
    "GATE_KERNELS",
    "KERNEL_ENV",
    "DEFAULT_THRESHOLD_FSH",
    "LEVEL_REFERENCES",
    "Gate",
    "gate_chain",
    "gate_table",
    "evaluate_gate",
    "evaluate_gates",
    "gate_window_us",
    "gate_time_span_us",
    "is_immersion",
    "timing_reach_samples",
]
