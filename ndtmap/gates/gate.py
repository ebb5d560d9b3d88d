"""The gate: a named window on the A-scan with its detection level, and the chains of gates that follow others.

A :class:`Gate` is a window in depth (``unit='mm'``) or time (``'us'``), a
detection level and a detection mode. The level is the gate's only threshold:
it decides where the gate triggers (so where an event time and depth exist)
and, for the gate a procedure searches, which positions belong to an
indication. It is stated either in %FSH (``threshold_fsh``) or in dB re a
reference (``threshold_db`` with ``reference``: a level in %FSH, or
``'backwall'`` for the nominal back-wall echo, which a procedure measures
before it evaluates the gate; :meth:`Gate.with_reference_fsh`; or ``'dac'``,
the recording curve (a DAC from reference reflectors or a DGS curve for an
equivalent flat-bottom hole, :class:`ndtmap.signal.DacCurve`), which the gate
is evaluated with: the amplitude re the curve is the maximum of
``A(t) / DAC(t)`` over the window, 0 dB = 100 % of the curve).

A gate that ``follows`` another opens relative to the other gate's event,
per A-scan. :func:`gate_chain` is the one place that resolves such chains:
it names the gate, the gate it follows, that gate's own, and so on, and
refuses undefined gates and circles.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, fields, replace
from typing import Any

from ndtmap._shared.validate import finite_float, float_in_range, one_of
from ndtmap.errors import GateError, NdtmapError, ParameterTypeError

__all__ = [
    "GATE_UNITS",
    "GATE_MODES",
    "DEFAULT_THRESHOLD_FSH",
    "LEVEL_REFERENCES",
    "Gate",
    "gate_table",
    "gate_chain",
]

GATE_UNITS = ("mm", "us")
GATE_MODES = ("peak", "first-crossing")
#: The detection level of a gate when none is given, %FSH.
DEFAULT_THRESHOLD_FSH = 20.0  # common practice, no source: a usual recording level for straight-beam scans
#: Named references of a level in dB (a number in %FSH is also accepted): the nominal back-wall echo, the
#: recording curve (DAC or DGS curve) given with the gate's evaluation.
LEVEL_REFERENCES = ("backwall", "dac")
_LEVEL_RTOL = 1e-6


@dataclass(frozen=True)
class Gate:
    """A named detection window on the A-scan.

    Parameters
    ----------
    name : str
        The user's own name, e.g. ``"flaw"`` or ``"backwall"``.
    start, end : float
        Window start and end in `unit` (start < end); for a following gate,
        relative to the followed gate's event.
    unit : {'mm', 'us'}, default 'mm'
        'mm': depth below the surface (or depth after the followed event);
        'us': time on the recorded axis (or time after the followed event).
    threshold_fsh : float, optional
        Detection level in %FSH, in [0, 1000]. Default 20 %FSH, or the level
        that `threshold_db` and a numeric `reference` give.
    mode : {'peak', 'first-crossing'}, default 'peak'
        Highest peak or first threshold crossing (flank).
    follows : str, optional
        Name of another gate whose event this window is relative to.
    threshold_db : float, optional
        The level in dB re `reference` instead of `threshold_fsh`
        (e.g. -12 dB re the back wall).
    reference : {'backwall', 'dac'} or float, optional
        Reference of `threshold_db`: a level in %FSH, ``'backwall'``, the
        nominal back-wall echo (the gate then has no level in %FSH until
        :meth:`with_reference_fsh` gives it the measured back-wall level),
        or ``'dac'``, the recording curve the gate is evaluated with (its
        level in %FSH depends on depth, so `threshold_fsh` stays None).

    Raises
    ------
    GateError
        For any invalid field, naming the gate.

    Examples
    --------
    >>> Gate("backwall", 10.0, 14.0, threshold_fsh=30).mode
    'peak'
    >>> round(Gate("flaw", 2, 20, threshold_db=-6.0, reference=80.0).threshold_fsh, 2)
    40.09
    >>> g = Gate("flaw", 2, 20, threshold_db=-12.0, reference="backwall")
    >>> g.threshold_fsh is None, round(g.with_reference_fsh(75.0).threshold_fsh, 2)
    (True, 18.84)
    >>> Gate("flaw", 5, 3)
    Traceback (most recent call last):
    ...
    ndtmap.errors.GateError: gate 'flaw': `start` must be smaller than `end`, got start=5, end=3 mm; swap the two values
    """

    name: str
    start: float
    end: float
    unit: str = "mm"
    threshold_fsh: float | None = None
    mode: str = "peak"
    follows: str | None = None
    threshold_db: float | None = None
    reference: str | float | None = None

    def __post_init__(self) -> None:
        name = self.name
        if not isinstance(name, str) or not name.strip():
            raise GateError(f"gate `name` must be non-empty text, got {name!r}")
        start = self._checked(finite_float, "start")
        end = self._checked(finite_float, "end")
        unit = self._checked(one_of, "unit", GATE_UNITS)
        if not start < end:
            raise GateError(
                f"gate {name!r}: `start` must be smaller than `end`, got start={start:g}, end={end:g} {unit}; "
                "swap the two values"
            )
        self._checked(one_of, "mode", GATE_MODES)
        follows = self.follows
        if follows is not None:
            if not isinstance(follows, str) or not follows.strip():
                raise GateError(f"gate {name!r}: `follows` must be the name of another gate or None, got {follows!r}")
            if follows == name:
                raise GateError(f"gate {name!r}: a gate cannot follow itself (`follows`={follows!r})")
        object.__setattr__(self, "start", start)
        object.__setattr__(self, "end", end)
        self._set_level()

    def _checked(self, func: Any, field: str, *args: Any, **kwargs: Any) -> Any:
        try:
            return func(field, getattr(self, field), *args, **kwargs)
        except NdtmapError as exc:
            raise GateError(f"gate {self.name!r}: {exc}") from None

    def _set_level(self) -> None:
        """Check the level fields and fill in `threshold_fsh` where the level fixes it."""
        if self.threshold_db is None:
            if self.reference is not None:
                raise GateError(
                    f"gate {self.name!r}: `reference` ({self.reference!r}) is used only with `threshold_db`; "
                    "give the level in dB or leave `reference` out"
                )
            level = DEFAULT_THRESHOLD_FSH if self.threshold_fsh is None else self.threshold_fsh
            object.__setattr__(self, "threshold_fsh", level)
            object.__setattr__(self, "threshold_fsh", self._checked(float_in_range, "threshold_fsh", 0.0, 1000.0,
                                                                    unit="%FSH"))
            return
        db = self._checked(finite_float, "threshold_db")
        object.__setattr__(self, "threshold_db", db)
        ref = self.reference
        if isinstance(ref, str):
            if ref not in LEVEL_REFERENCES:
                raise GateError(
                    f"gate {self.name!r}: `reference` must be 'backwall', 'dac' or a level in %FSH, got {ref!r}")
            level = None
        elif isinstance(ref, bool) or not isinstance(ref, int | float) or not math.isfinite(ref) or ref <= 0:
            raise GateError(
                f"gate {self.name!r}: `threshold_db` needs `reference`: 'backwall' or a level in %FSH above 0, "
                f"got {ref!r}"
            )
        else:
            object.__setattr__(self, "reference", float(ref))
            level = float(ref) * 10.0 ** (db / 20.0)
        given = self.threshold_fsh
        if given is not None:
            given = self._checked(float_in_range, "threshold_fsh", 0.0, 1000.0, unit="%FSH")
            if ref == "dac":
                raise GateError(
                    f"gate {self.name!r}: a level re the DAC has no single value in %FSH; leave `threshold_fsh` out")
            if level is not None and abs(given - level) > _LEVEL_RTOL * level:
                raise GateError(
                    f"gate {self.name!r}: `threshold_fsh` {given:g} %FSH contradicts {db:g} dB re {ref:g} %FSH "
                    f"({level:.4g} %FSH); give one of them"
                )
            level = given
        if level is not None:
            object.__setattr__(self, "threshold_fsh", self._checked_level(level))

    def _checked_level(self, level: float) -> float:
        try:
            return float_in_range("threshold_fsh", level, 0.0, 1000.0, unit="%FSH")
        except NdtmapError as exc:
            raise GateError(f"gate {self.name!r}: the level {self.level_text()} gives {exc}") from None

    @property
    def needs_reference(self) -> bool:
        """True while the level is in dB re the back wall and that level is not known yet."""
        return self.reference == "backwall" and self.threshold_fsh is None

    @property
    def level_re_curve(self) -> bool:
        """True when the level is in dB re the recording curve (DAC or DGS curve)."""
        return self.reference == "dac"

    def with_reference_fsh(self, reference_fsh: float) -> Gate:
        """This gate with its level in dB re the back wall turned into %FSH, given the back-wall level.

        Gates whose level is already in %FSH are returned unchanged.
        """
        if self.reference != "backwall":
            return self
        ref = self._checked_level_input(reference_fsh)
        return replace(self, threshold_fsh=ref * 10.0 ** (float(self.threshold_db) / 20.0))

    def _checked_level_input(self, reference_fsh: Any) -> float:
        try:
            ref = finite_float("reference_fsh", reference_fsh)
        except NdtmapError as exc:
            raise GateError(f"gate {self.name!r}: {exc}") from None
        if ref <= 0:
            raise GateError(f"gate {self.name!r}: the back-wall level must be above 0 %FSH, got {ref:g}")
        return ref

    def level_text(self) -> str:
        """The detection level for people: ``'20 %FSH'`` or ``'-12 dB re the back wall (18.8 %FSH)'``."""
        if self.threshold_db is None:
            return f"{self.threshold_fsh:g} %FSH"
        named = {"backwall": "the back wall", "dac": "the DAC"}
        ref = named[self.reference] if isinstance(self.reference, str) else f"{self.reference:g} %FSH"
        known = f" ({self.threshold_fsh:.3g} %FSH)" if self.threshold_fsh is not None else ""
        return f"{self.threshold_db:g} dB re {ref}{known}"

    def to_dict(self) -> dict[str, Any]:
        """The definition as a plain dict (JSON-ready); the dB fields only when the level is given in dB."""
        out = {f.name: getattr(self, f.name) for f in fields(self)}
        if self.threshold_db is None:
            del out["threshold_db"], out["reference"]
        return out

    @classmethod
    def from_dict(cls, data: Mapping[str, Any]) -> Gate:
        """Build a gate from :meth:`to_dict` output (unknown keys raise GateError).

        Examples
        --------
        >>> g = Gate("bw", 10, 14)
        >>> Gate.from_dict(g.to_dict()) == g
        True
        """
        if not isinstance(data, Mapping):
            raise GateError(f"a gate definition must be a mapping, got {type(data).__name__}")
        known = {f.name for f in fields(cls)}
        unknown = sorted(set(data) - known)
        if unknown:
            raise GateError(f"unknown gate field(s) {unknown}; known fields: {sorted(known)}")
        missing = [k for k in ("name", "start", "end") if k not in data]
        if missing:
            raise GateError(f"gate definition lacks {missing}")
        return cls(**dict(data))


def _as_gates(gates: Any, name: str) -> list[Gate]:
    if isinstance(gates, Gate):
        return [gates]
    if isinstance(gates, Mapping):
        gates = list(gates.values())
    try:
        out = list(gates)
    except TypeError:
        raise ParameterTypeError(f"`{name}` must be a sequence of Gate, got {type(gates).__name__}") from None
    for g in out:
        if not isinstance(g, Gate):
            raise ParameterTypeError(f"`{name}` must hold Gate objects, got {type(g).__name__}")
    return out


def gate_chain(gates: Mapping[str, Gate] | Iterable[Gate], name: str) -> list[Gate]:
    """The gate called `name` followed by the gates it follows, nearest first.

    Parameters
    ----------
    gates : mapping of name to Gate, or sequence of Gate
        Every gate the chain may use.
    name : str
        The gate whose chain is wanted.

    Returns
    -------
    list of Gate
        ``[gate, the gate it follows, that gate's own, ...]``.

    Raises
    ------
    GateError
        An unknown gate, a followed gate that is not defined, or a circle.

    Examples
    --------
    >>> bw1, bw2 = Gate("bw1", 10, 14), Gate("bw2", 8, 16, follows="bw1")
    >>> [g.name for g in gate_chain([bw1, bw2], "bw2")]
    ['bw2', 'bw1']
    """
    table = gates if isinstance(gates, Mapping) else {g.name: g for g in _as_gates(gates, "gates")}
    if name not in table:
        raise GateError(f"no gate named {name!r}; gates: {list(table)}")
    chain = [table[name]]
    while chain[-1].follows is not None:
        cur = chain[-1]
        if cur.follows not in table:
            raise GateError(
                f"gate {cur.name!r} follows {cur.follows!r}, which is not defined; define that gate too "
                f"(defined: {sorted(table)})"
            )
        if any(g.name == cur.follows for g in chain):
            names = " -> ".join([*(g.name for g in chain), cur.follows])
            raise GateError(f"gates follow each other in a circle (a cycle): {names}; make one of them stand alone")
        chain.append(table[cur.follows])
    return chain


def gate_table(gate: Gate, others: Iterable[Gate] | Mapping[str, Gate] | Gate = ()) -> dict[str, Gate]:
    """`gate` and `others` by name, every follow chain checked.

    Raises
    ------
    ParameterTypeError
        `gate` or an item of `others` is not a Gate.
    GateError
        Two different gates with one name, an undefined followed gate, or a circle.

    Examples
    --------
    >>> sorted(gate_table(Gate("bw2", 8, 16, follows="bw1"), [Gate("bw1", 10, 14)]))
    ['bw1', 'bw2']
    """
    if not isinstance(gate, Gate):
        raise ParameterTypeError(f"`gate` must be a Gate, got {type(gate).__name__}")
    table: dict[str, Gate] = {}
    for g in [gate, *_as_gates(others, "others")]:
        if g.name in table and table[g.name] != g:
            raise GateError(f"two different gates are named {g.name!r}; give each gate its own name")
        table[g.name] = g
    for g in table.values():
        gate_chain(table, g.name)
    return table
