"""ndtmap.gates."""

from ndtmap.gates.evaluate import (
    GATE_KERNELS,
    GATE_MODES,
    GATE_UNITS,
    Gate,
    evaluate_gate,
    evaluate_gates,
    gate_window_us,
    is_immersion,
)

__all__ = [
    "GATE_UNITS",
    "GATE_MODES",
    "GATE_KERNELS",
    "Gate",
    "evaluate_gate",
    "evaluate_gates",
    "gate_window_us",
    "is_immersion",
]
