"""Screening of sized indications against user-supplied rules (a small TOML file).

The rules are the user's, written in a TOML file (see
``docs/screening-rules.md`` for the vocabulary and
``docs/examples/screening-rules.toml`` for an example): a recording level,
reporting limits on single indications (length, area, equivalent size,
back-wall loss, amplitude) and limits on the number of indications per
square metre of scanned area. Nothing of any code or standard is built in.

Screening only says, per indication and overall, "exceeds rule <name>",
"within rules", "below recording level <name>" or, where validity flags
undermine the value a rule reads (:data:`ndtmap.indications.flags.SCREENING_UNDERMINED_BY`),
"not screened: review required (<flags>)". It never accepts or rejects:
every result carries :data:`ndtmap.CAUTION`, because acceptance is decided by
qualified personnel under the applicable code.
"""

from __future__ import annotations

import math
import os
import re
import tomllib
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from typing import Any

from ndtmap._shared.caution import CAUTION
from ndtmap._shared.validate import positive_float
from ndtmap.errors import FileFormatError, ParameterTypeError, ProcedureError
from ndtmap.indications.detection import Indication
from ndtmap.indications.flags import FLAGS, SCREENING_UNDERMINED_BY
from ndtmap.indications.record import IndicationRecord

__all__ = [
    "QUANTITIES",
    "QUANTITY_GROUPS",
    "REVIEW_REQUIRED",
    "RecordingLevel",
    "Limit",
    "DensityLimit",
    "Rules",
    "IndicationScreening",
    "ScreeningResult",
    "load_rules",
    "parse_rules",
    "screen",
]

#: Quantities a `[[limit]]` may bound, with their meaning (record keys of
#: :func:`ndtmap.indications.pipeline.size_indications`).
QUANTITIES: dict[str, str] = {
    "length_mm": "largest dimension of the sized outline in any direction, mm",
    "length_scan_mm": "extent of the sized outline along the scan axis, mm",
    "length_index_mm": "extent of the sized outline along the index axis, mm",
    "length_20db_mm": "the larger of the beam-corrected 20 dB drop lengths, mm",
    "area_mm2": "-6 dB area (back-wall-loss indications: area of the loss region), mm^2",
    "ers_mm": "DGS equivalent flat-bottom-hole diameter, mm",
    "backwall_loss_db": "largest back-wall loss of a back-wall-loss indication, or under a flaw echo, dB",
    "peak_fsh": "peak amplitude, %FSH",
    "peak_db": "peak amplitude in dB re the reference level (DAC or reference reflector)",
}

#: The group of each quantity in :data:`ndtmap.indications.flags.SCREENING_UNDERMINED_BY` (which flags
#: undermine it, and how).
QUANTITY_GROUPS: dict[str, str] = {
    "length_mm": "size",
    "length_scan_mm": "size",
    "length_index_mm": "size",
    "length_20db_mm": "size_20db",
    "area_mm2": "size",
    "ers_mm": "ers",
    "backwall_loss_db": "backwall_loss",
    "peak_fsh": "amplitude",
    "peak_db": "amplitude",
}

KINDS = ("amplitude", "backwall_loss")

#: The start of the statement for an indication (or a scan) that screening cannot settle.
REVIEW_REQUIRED = "not screened: review required"

_TOP_KEYS = {"name", "description", "recording", "limit", "density"}
_RECORDING_KEYS = {"name", "description", "level_fsh", "level_db"}
_LIMIT_KEYS = {"name", "description", "quantity", "max", "kind"}
_DENSITY_KEYS = {"name", "description", "max_per_m2", "kind"}


@dataclass(frozen=True)
class RecordingLevel:
    """Amplitude indications below this level are not recorded (not screened further).

    Exactly one of `level_fsh` (%FSH) and `level_db` (dB re the reference
    level of the indication) is set. Back-wall-loss indications are always
    recorded.
    """

    name: str
    level_fsh: float | None = None
    level_db: float | None = None
    description: str = ""


@dataclass(frozen=True)
class Limit:
    """A reporting limit: an indication exceeds it when ``quantity > max``."""

    name: str
    quantity: str
    max: float
    kind: str | None = None
    description: str = ""


@dataclass(frozen=True)
class DensityLimit:
    """Exceeded when recorded indications per m^2 of scanned area > `max_per_m2`."""

    name: str
    max_per_m2: float
    kind: str | None = None
    description: str = ""


@dataclass(frozen=True)
class Rules:
    """A parsed rules file."""

    name: str = ""
    description: str = ""
    recording: RecordingLevel | None = None
    limits: tuple[Limit, ...] = ()
    densities: tuple[DensityLimit, ...] = ()
    source: str = ""

    @property
    def rule_names(self) -> tuple[str, ...]:
        """Names of all rules, in file order (recording level first)."""
        names = [self.recording.name] if self.recording else []
        return (*names, *(r.name for r in self.limits), *(r.name for r in self.densities))


@dataclass(frozen=True)
class IndicationScreening:
    """Screening of one indication."""

    id: int
    recorded: bool
    statement: str
    exceeded: tuple[str, ...] = ()
    not_evaluated: tuple[str, ...] = ()
    notes: tuple[str, ...] = ()
    open_rules: tuple[str, ...] = ()
    review_flags: tuple[str, ...] = ()

    def as_dict(self) -> dict[str, Any]:
        """Plain JSON-serialisable dict."""
        return {
            "id": self.id,
            "recorded": self.recorded,
            "statement": self.statement,
            "exceeded": list(self.exceeded),
            "not_evaluated": list(self.not_evaluated),
            "notes": list(self.notes),
            "open_rules": list(self.open_rules),
            "review_flags": list(self.review_flags),
        }


@dataclass(frozen=True)
class ScreeningResult:
    """Screening of a set of indications against :class:`Rules`.

    Attributes
    ----------
    indications : tuple of IndicationScreening
        One per indication, in the order given.
    exceeded : tuple of str
        Names of every rule exceeded by any indication or by the density.
    overall : str
        ``"within rules"``, ``"exceeds rule <a>; exceeds rule <b>"``, either
        followed by (or, alone) ``"not screened: review required (...)"`` when
        validity flags leave a rule open for some indication or density.
    densities_per_m2 : dict
        Density rule name -> recorded indications per m^2 counted for it (every
        recorded indication, flagged or not).
    scanned_area_mm2 : float
        Area the densities refer to.
    caution : str
        Always :data:`ndtmap.CAUTION`.
    review_required : tuple of int
        Ids of the indications whose screening flags leave open.
    open_rules : tuple of str
        Rules left open for some indication or density by validity flags.
    review_flags : tuple of str
        The flags that left them open.
    """

    indications: tuple[IndicationScreening, ...]
    exceeded: tuple[str, ...]
    overall: str
    densities_per_m2: dict[str, float] = field(default_factory=dict)
    scanned_area_mm2: float = 0.0
    rules_name: str = ""
    caution: str = field(default_factory=lambda: _caution())
    review_required: tuple[int, ...] = ()
    open_rules: tuple[str, ...] = ()
    review_flags: tuple[str, ...] = ()

    def for_id(self, id: int) -> IndicationScreening:
        """The screening of the indication with this id."""
        for s in self.indications:
            if s.id == id:
                return s
        raise KeyError(id)

    def as_dict(self) -> dict[str, Any]:
        """Plain JSON-serialisable dict."""
        return {
            "rules": self.rules_name,
            "overall": self.overall,
            "exceeded": list(self.exceeded),
            "densities_per_m2": dict(self.densities_per_m2),
            "scanned_area_mm2": self.scanned_area_mm2,
            "indications": [s.as_dict() for s in self.indications],
            "caution": self.caution,
            "review_required": list(self.review_required),
            "open_rules": list(self.open_rules),
            "review_flags": list(self.review_flags),
        }


def _caution() -> str:
    return CAUTION


# --------------------------------------------------------------------------- parsing


def _line_of(text: str, key: str, header: str | None = None, occurrence: int = 0) -> int | None:
    """1-based line of `key = ...` (in the `occurrence`-th `[header]`/`[[header]]` table), if found."""
    lines = text.splitlines()
    start, stop = 0, len(lines)
    if header is not None:
        pat = re.compile(r"^\s*\[\[?\s*" + re.escape(header) + r"\s*\]\]?\s*(#.*)?$")
        heads = [i for i, ln in enumerate(lines) if pat.match(ln)]
        if occurrence >= len(heads):
            return None
        start = heads[occurrence] + 1
        nxt = [i for i, ln in enumerate(lines) if i >= start and re.match(r"^\s*\[", ln)]
        stop = nxt[0] if nxt else len(lines)
        if key == "":
            return heads[occurrence] + 1
    else:
        nxt = [i for i, ln in enumerate(lines) if re.match(r"^\s*\[", ln)]
        stop = nxt[0] if nxt else len(lines)
    kpat = re.compile(r"^\s*[\"']?" + re.escape(key) + r"[\"']?\s*=")
    for i in range(start, stop):
        if kpat.match(lines[i]):
            return i + 1
    if header is not None:
        return start  # the table header line
    return None


class _Ctx:
    def __init__(self, text: str, source: str) -> None:
        self.text = text
        self.source = source

    def fail(self, message: str, key: str = "", header: str | None = None, occurrence: int = 0) -> ProcedureError:
        line = _line_of(self.text, key, header, occurrence) if (key or header) else None
        where = f"{self.source}, line {line}" if line else self.source
        return ProcedureError(f"{where}: {message}")


def _where(header: str, occurrence: int, many: bool) -> str:
    return f"[[{header}]] number {occurrence + 1}" if many else f"[{header}]"


def _check_keys(ctx: _Ctx, table: Mapping[str, Any], allowed: set[str], header: str | None, occ: int,
                label: str) -> None:
    for key in table:
        if key not in allowed:
            listed = ", ".join(sorted(allowed))
            raise ctx.fail(f"unknown key `{key}` in {label}; allowed keys: {listed}", key, header, occ)


def _text(ctx: _Ctx, table: Mapping[str, Any], key: str, header: str | None, occ: int, label: str,
          required: bool) -> str:
    if key not in table:
        if required:
            raise ctx.fail(f"{label} needs a `{key}` (a text)", "", header, occ)
        return ""
    value = table[key]
    if not isinstance(value, str):
        raise ctx.fail(f"`{key}` in {label} must be a text in quotes, got {value!r}", key, header, occ)
    if required and not value.strip():
        raise ctx.fail(f"`{key}` in {label} must not be empty", key, header, occ)
    return value.strip() if required else value


def _number(ctx: _Ctx, table: Mapping[str, Any], key: str, header: str | None, occ: int, label: str, *,
            nonnegative: bool) -> float:
    value = table[key]
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise ctx.fail(f"`{key}` in {label} must be a number, got {value!r}", key, header, occ)
    out = float(value)
    if not math.isfinite(out):
        raise ctx.fail(f"`{key}` in {label} must be finite, got {value!r}", key, header, occ)
    if nonnegative and out < 0:
        raise ctx.fail(f"`{key}` in {label} must be 0 or greater, got {value!r}", key, header, occ)
    return out


def _kind(ctx: _Ctx, table: Mapping[str, Any], header: str, occ: int, label: str) -> str | None:
    if "kind" not in table:
        return None
    value = table["kind"]
    if value not in KINDS:
        raise ctx.fail(f"`kind` in {label} must be one of {', '.join(KINDS)}, got {value!r}", "kind", header, occ)
    return str(value)


def _tables(ctx: _Ctx, doc: Mapping[str, Any], key: str) -> list[Mapping[str, Any]]:
    if key not in doc:
        return []
    value = doc[key]
    if isinstance(value, Mapping):
        raise ctx.fail(f"`{key}` must be an array of tables: write [[{key}]] (double brackets)", "", key, 0)
    if not isinstance(value, list) or not all(isinstance(t, Mapping) for t in value):
        raise ctx.fail(f"`{key}` must be written as [[{key}]] tables", key)
    return value


def parse_rules(text: str, *, source: str = "<rules>") -> Rules:
    """Parse screening rules from TOML text.

    Parameters
    ----------
    text : str
        TOML text (see ``docs/screening-rules.md``).
    source : str, optional
        Name used in error messages (a path).

    Returns
    -------
    Rules

    Raises
    ------
    ProcedureError
        For malformed TOML, unknown keys, wrong types, negative limits,
        missing or repeated names; the message names the key and, where it can
        be found, the line.

    Examples
    --------
    >>> r = parse_rules('''
    ... [recording]
    ... name = "record"
    ... level_fsh = 20
    ... [[limit]]
    ... name = "long"
    ... quantity = "length_mm"
    ... max = 10
    ... ''')
    >>> r.rule_names
    ('record', 'long')
    """
    if not isinstance(text, str):
        raise ParameterTypeError(f"`text` must be a str, got {type(text).__name__}")
    ctx = _Ctx(text, source)
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ProcedureError(f"{source}: not valid TOML: {exc}") from None
    _check_keys(ctx, doc, _TOP_KEYS, None, 0, "the top level")
    name = _text(ctx, doc, "name", None, 0, "the top level", required=False)
    description = _text(ctx, doc, "description", None, 0, "the top level", required=False)

    recording = None
    if "recording" in doc:
        rec = doc["recording"]
        if not isinstance(rec, Mapping):
            raise ctx.fail("`recording` must be a table: write [recording] once", "recording")
        label = "[recording]"
        _check_keys(ctx, rec, _RECORDING_KEYS, "recording", 0, label)
        rname = _text(ctx, rec, "name", "recording", 0, label, required=True)
        has = [k for k in ("level_fsh", "level_db") if k in rec]
        if len(has) != 1:
            raise ctx.fail(f"{label} needs exactly one of `level_fsh` and `level_db`, has {has or 'neither'}", "",
                           "recording", 0)
        key = has[0]
        value = _number(ctx, rec, key, "recording", 0, label, nonnegative=(key == "level_fsh"))
        recording = RecordingLevel(
            name=rname,
            level_fsh=value if key == "level_fsh" else None,
            level_db=value if key == "level_db" else None,
            description=_text(ctx, rec, "description", "recording", 0, label, required=False),
        )

    limits = []
    for occ, t in enumerate(_tables(ctx, doc, "limit")):
        label = _where("limit", occ, True)
        _check_keys(ctx, t, _LIMIT_KEYS, "limit", occ, label)
        lname = _text(ctx, t, "name", "limit", occ, label, required=True)
        if "quantity" not in t:
            raise ctx.fail(f"{label} needs a `quantity`, one of {', '.join(QUANTITIES)}", "", "limit", occ)
        q = t["quantity"]
        if q not in QUANTITIES:
            raise ctx.fail(f"`quantity` in {label} must be one of {', '.join(QUANTITIES)}, got {q!r}", "quantity",
                           "limit", occ)
        if "max" not in t:
            raise ctx.fail(f"{label} needs a `max` (exceeded when {q} > max)", "", "limit", occ)
        mx = _number(ctx, t, "max", "limit", occ, label, nonnegative=(q != "peak_db"))
        limits.append(Limit(lname, str(q), mx, _kind(ctx, t, "limit", occ, label),
                            _text(ctx, t, "description", "limit", occ, label, required=False)))

    densities = []
    for occ, t in enumerate(_tables(ctx, doc, "density")):
        label = _where("density", occ, True)
        _check_keys(ctx, t, _DENSITY_KEYS, "density", occ, label)
        dname = _text(ctx, t, "name", "density", occ, label, required=True)
        if "max_per_m2" not in t:
            raise ctx.fail(f"{label} needs a `max_per_m2`", "", "density", occ)
        mx = _number(ctx, t, "max_per_m2", "density", occ, label, nonnegative=True)
        densities.append(DensityLimit(dname, mx, _kind(ctx, t, "density", occ, label),
                                      _text(ctx, t, "description", "density", occ, label, required=False)))

    rules = Rules(name, description, recording, tuple(limits), tuple(densities), source)
    seen: set[str] = set()
    for n in rules.rule_names:
        if n in seen:
            raise ctx.fail(f"rule name {n!r} is used twice; give every rule its own name")
        seen.add(n)
    if not rules.rule_names:
        raise ctx.fail("the file defines no rule: add [recording], [[limit]] or [[density]] tables")
    return rules


def load_rules(path: str | os.PathLike[str]) -> Rules:
    """Read and check a screening-rules TOML file.

    Parameters
    ----------
    path : str or path-like
        The file.

    Returns
    -------
    Rules

    Raises
    ------
    FileFormatError
        When the file cannot be read.
    ProcedureError
        When its content is malformed (see :func:`parse_rules`).
    """
    p = os.fspath(path)
    try:
        with open(p, "rb") as fh:
            raw = fh.read()
    except OSError as exc:
        raise FileFormatError(f"cannot read the rules file `{p}`: {exc.strerror or exc}") from None
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError:
        raise ProcedureError(f"{p}: the rules file must be UTF-8 text") from None
    return parse_rules(text, source=p)


# --------------------------------------------------------------------------- screening


@dataclass(frozen=True)
class _Screened:
    """What screening reads of one indication: id, kind, flags and the value of every quantity (None: missing)."""

    id: int
    kind: str
    flags: tuple[str, ...]
    values: dict[str, float | None]


def _finite(v: Any) -> float | None:
    if v is None or isinstance(v, bool) or not isinstance(v, int | float) or not math.isfinite(v):
        return None
    return float(v)


def _longer(*values: Any) -> float | None:
    found = [v for v in (_finite(x) for x in values) if v is not None]
    return max(found) if found else None


def _from_record(rec: IndicationRecord) -> _Screened:
    values = {q: _finite(getattr(rec, q)) for q in QUANTITIES if q not in ("length_mm", "length_20db_mm")}
    values["length_mm"] = _finite(rec.length_mm) or _longer(rec.length_scan_mm, rec.length_index_mm)
    values["length_20db_mm"] = _longer(rec.length_scan_20db_mm, rec.length_index_20db_mm)
    if rec.total_backwall_loss:
        values["backwall_loss_db"] = math.inf
    return _Screened(rec.id, rec.kind, rec.flags, values)


def _from_mapping(rec: Mapping[str, Any], k: int) -> _Screened:
    values = {q: _finite(rec.get(q)) for q in QUANTITIES if q not in ("length_mm", "length_20db_mm")}
    values["length_mm"] = (_finite(rec.get("length_mm"))
                           or _longer(rec.get("length_scan_mm"), rec.get("length_index_mm")))
    values["length_20db_mm"] = _longer(rec.get("length_scan_20db_mm"), rec.get("length_index_20db_mm"))
    if rec.get("total_backwall_loss"):
        values["backwall_loss_db"] = math.inf
    return _Screened(int(rec.get("id", k + 1)), str(rec.get("kind", "amplitude")), tuple(rec.get("flags") or ()),
                     values)


def _screened(ind: Any, k: int) -> _Screened:
    if isinstance(ind, IndicationRecord):
        return _from_record(ind)
    if isinstance(ind, Indication):
        return _from_mapping(ind.as_dict(), k)
    if isinstance(ind, Mapping):
        return _from_mapping(ind, k)
    raise ParameterTypeError(
        f"`indications[{k}]` must be an IndicationRecord (from size_indications), a mapping with the same keys "
        f"or an Indication, got {type(ind).__name__}"
    )


def _statement(exceeded: Iterable[str], review: str = "") -> str:
    """``exceeds rule <a>; ...``, then ``not screened: review required (<review>)`` when `review` is given."""
    parts = [f"exceeds rule {n}" for n in exceeded]
    if review:
        parts.append(f"{REVIEW_REQUIRED} ({review})")
    return "; ".join(parts) if parts else "within rules"


def _in_flag_order(names: Iterable[str]) -> tuple[str, ...]:
    """Distinct names in report order (:data:`FLAGS`), names not in it (e.g. ``methods_disagree``) after."""
    given = list(dict.fromkeys(names))
    rank = {f: k for k, f in enumerate(FLAGS)}
    return tuple(sorted(given, key=lambda f: (rank.get(f, len(rank)), given.index(f))))


def _undermined(flags: Iterable[str], group: str) -> tuple[str | None, tuple[str, ...]]:
    """How `flags` undermine a quantity group: None, ``"lower_bound"`` or ``"uncertain"``; and the flags that do."""
    found = {f: SCREENING_UNDERMINED_BY[f][group] for f in flags if group in SCREENING_UNDERMINED_BY.get(f, {})}
    if not found:
        return None, ()
    how = "uncertain" if "uncertain" in found.values() else "lower_bound"
    return how, _in_flag_order(found)


def _open_note(rule: str, what: str, value: float, max_: float, how: str, by: Iterable[str]) -> str:
    sign = ">" if value > max_ else "<="
    why = "a lower bound" if how == "lower_bound" else "not a firm value"
    return f"{rule}: {what} {value:.4g} {sign} {max_:.4g}, but it is {why} ({', '.join(by)}): not screened"


def _recording_open(item: _Screened, rl: RecordingLevel, notes: list[str], not_eval: list[str]) -> bool | None:
    """The recording level: False (below it, not recorded), True (recorded) or None (flags leave it open)."""
    key, level = ("peak_fsh", rl.level_fsh) if rl.level_fsh is not None else ("peak_db", rl.level_db)
    v = item.values[key]
    if v is None:
        not_eval.append(f"{rl.name}: no {key}")
        notes.append(f"recording level {rl.name} not evaluated (no {key}); screened as recorded")
        return True
    if v >= level:
        return True
    how, by = _undermined(item.flags, "amplitude")
    if how is None:
        return False
    notes.append(_open_note(rl.name, f"{key} (recording level)", v, float(level), how, by)
                 + "; screened as recorded")
    return None


def _loss_under_flaw(lim: Limit, item: _Screened) -> bool:
    """A back-wall-loss limit also holds for the loss under a flaw echo, carried by the flaw's record."""
    return (lim.kind == "backwall_loss" and lim.quantity == "backwall_loss_db" and item.kind == "amplitude"
            and item.values.get("backwall_loss_db") is not None)


def _screen_one(item: _Screened, rules: Rules) -> IndicationScreening:
    """The screening of one indication against the recording level and the limits.

    A limit whose quantity the indication's flags undermine
    (:data:`ndtmap.indications.flags.SCREENING_UNDERMINED_BY`) is exceeded
    only when the value exceeds it and is a lower bound; otherwise it is left
    open and the statement says ``not screened: review required (<flags>)``.
    """
    notes: list[str] = []
    not_eval: list[str] = []
    open_rules: list[str] = []
    review: list[str] = []
    rl = rules.recording
    if rl is not None and item.kind == "amplitude":
        recorded = _recording_open(item, rl, notes, not_eval)
        if recorded is False:
            return IndicationScreening(item.id, False, f"below recording level {rl.name}", (), tuple(not_eval),
                                       tuple(notes))
        if recorded is None:
            open_rules.append(rl.name)
            review.extend(_undermined(item.flags, "amplitude")[1])
    exceeded: list[str] = []
    for lim in rules.limits:
        if lim.kind is not None and lim.kind != item.kind and not _loss_under_flaw(lim, item):
            continue
        v = item.values[lim.quantity]
        if v is None:
            not_eval.append(f"{lim.name}: no {lim.quantity}")
            continue
        how, by = _undermined(item.flags, QUANTITY_GROUPS[lim.quantity])
        if v > lim.max and how != "uncertain":
            exceeded.append(lim.name)
            if how is not None:
                notes.append(f"{lim.name}: {lim.quantity} {v:.4g} > {lim.max:.4g} and is a lower bound "
                             f"({', '.join(by)}): exceeded whatever the true value")
        elif how is not None:
            open_rules.append(lim.name)
            review.extend(by)
            notes.append(_open_note(lim.name, lim.quantity, v, lim.max, how, by))
    flags = _in_flag_order(review)
    statement = _statement(exceeded, ", ".join(flags))
    if not_eval:
        statement += " (not evaluated: " + ", ".join(n.split(":")[0] for n in not_eval) + ")"
    return IndicationScreening(item.id, True, statement, tuple(exceeded), tuple(not_eval), tuple(notes),
                               tuple(open_rules), flags)


def _counts_in_doubt(item: _Screened, screening: IndicationScreening, rules: Rules) -> bool:
    """True when a recorded indication may not count for a density: maybe not a reflector, or maybe not recorded."""
    unsure_recording = rules.recording is not None and rules.recording.name in screening.open_rules
    return unsure_recording or _undermined(item.flags, "count")[0] is not None


def _overall_review(ids: Iterable[int], densities: Iterable[str], flags: Iterable[str]) -> str:
    """``indications 2, 3 and rule <d>: <flags>``: where screening is left open, and by which flags."""
    where = []
    ids, densities = list(ids), list(densities)
    if ids:
        where.append(("indication " if len(ids) == 1 else "indications ") + ", ".join(str(i) for i in ids))
    if densities:
        where.append(("rule " if len(densities) == 1 else "rules ") + ", ".join(densities))
    return f"{' and '.join(where)}: {', '.join(_in_flag_order(flags))}" if where else ""


def screen(indications: Iterable[Any], rules: Rules, *, scanned_area_mm2: float) -> ScreeningResult:
    """Screen indications against rules.

    Parameters
    ----------
    indications : iterable of IndicationRecord, mapping or Indication
        Records from :func:`ndtmap.indications.pipeline.size_indications`
        (read by attribute), mappings with the keys of their JSON form, or
        :class:`~ndtmap.indications.detection.Indication` objects (which
        carry only amplitude, position and detected area). To screen records
        and keep the statements in them, use
        :func:`ndtmap.indications.screening.screen_records`.
    rules : Rules
        From :func:`load_rules` or :func:`parse_rules`.
    scanned_area_mm2 : float
        Area scanned, mm^2 (> 0), for the density rules.

    Returns
    -------
    ScreeningResult
        Per indication and overall "exceeds rule <name>", "within rules" or
        "not screened: review required (<flags>)", with :data:`ndtmap.CAUTION`.

    Notes
    -----
    A flag of :data:`ndtmap.indications.flags.SCREENING_UNDERMINED_BY`
    undermines the quantities of some groups. A limit on such a quantity is
    "exceeded" only when the value exceeds it and the flags make it a lower
    bound (the true value can only be larger); otherwise the limit is left
    open, the indication is never "within rules" and its statement ends with
    "not screened: review required (<flags>)". The same holds for the
    recording level when the peak is undermined. Density rules count every
    recorded indication; one exceeded only by counting indications that may
    not be reflectors of their own (``repeat_echo``, ``backwall_echo``) or
    whose recording is open is left open too.

    Examples
    --------
    >>> rules = parse_rules('[[limit]]\\nname = "long"\\nquantity = "length_mm"\\nmax = 10')
    >>> res = screen([{"id": 1, "kind": "amplitude", "length_scan_mm": 12.0}], rules, scanned_area_mm2=1e4)
    >>> res.overall, res.indications[0].statement
    ('exceeds rule long', 'exceeds rule long')
    >>> "qualified personnel" in res.caution
    True
    >>> edge = {"id": 2, "kind": "amplitude", "length_scan_mm": 8.0, "flags": ["at_scan_edge"]}
    >>> screen([edge], rules, scanned_area_mm2=1e4).indications[0].statement
    'not screened: review required (at_scan_edge)'
    """
    if not isinstance(rules, Rules):
        raise ParameterTypeError(f"`rules` must be Rules (from load_rules), got {type(rules).__name__}")
    area = positive_float("scanned_area_mm2", scanned_area_mm2)
    items = [_screened(ind, k) for k, ind in enumerate(indications)]
    out: list[IndicationScreening] = []
    all_exceeded: list[str] = []
    recorded: list[tuple[_Screened, bool]] = []  # (item, whether its count is in doubt)
    for item in items:
        screening = _screen_one(item, rules)
        out.append(screening)
        if screening.recorded:
            recorded.append((item, _counts_in_doubt(item, screening, rules)))
            all_exceeded.extend(n for n in screening.exceeded if n not in all_exceeded)
    open_rules = [n for s in out for n in s.open_rules]
    review_flags = [f for s in out for f in s.review_flags]
    open_densities: list[str] = []
    densities: dict[str, float] = {}
    for dl in rules.densities:
        counted = [(r, doubt) for r, doubt in recorded if dl.kind is None or r.kind == dl.kind]
        per_m2 = len(counted) / (area * 1e-6)
        firm_per_m2 = sum(1 for _, doubt in counted if not doubt) / (area * 1e-6)
        densities[dl.name] = per_m2
        if firm_per_m2 > dl.max_per_m2:
            if dl.name not in all_exceeded:
                all_exceeded.append(dl.name)
        elif per_m2 > dl.max_per_m2:  # exceeded only with indications that may not count
            open_densities.append(dl.name)
            review_flags.extend(f for r, doubt in counted if doubt for f in r.flags if f in SCREENING_UNDERMINED_BY)
    review_ids = tuple(s.id for s in out if s.open_rules)
    review_flags_t = _in_flag_order(review_flags)
    return ScreeningResult(
        indications=tuple(out),
        exceeded=tuple(all_exceeded),
        overall=_statement(all_exceeded, _overall_review(review_ids, open_densities, review_flags_t)),
        densities_per_m2=densities,
        scanned_area_mm2=area,
        rules_name=rules.name,
        caution=_caution(),
        review_required=review_ids,
        open_rules=tuple(dict.fromkeys([*open_rules, *open_densities])),
        review_flags=review_flags_t,
    )
