"""Indications: detection, sizing, validity flags, DGS and screening of gated C-scan maps.

The whole chain is :func:`size_indications`, which returns one
:class:`IndicationRecord` per indication (``to_dict()`` is the JSON record of
``ndtmap indications``); its options are grouped in :class:`DetectionOptions`,
:class:`LossOptions`, :class:`SizingOptions`, :class:`DgsOptions`,
:class:`FlagOptions` and :class:`EchoCheck`. :func:`screen_records` is the one
screening step, :func:`largest_indication` the one rule for the largest
indication. The steps are public too: :func:`detect_indications`,
:func:`drop_outline` and the other sized outlines (:func:`edge_maximum_outline`,
:func:`level_outline`), :func:`drop_length` and the other sizes along lines, :func:`equivalent_fbh_diameter`,
the flags of :data:`FLAG_MEANINGS`, :func:`classify_echoes`, :func:`screen`.
"""

from ndtmap.indications.detection import (
    Indication,
    detect_backwall_loss,
    detect_indications,
    indications_table,
    reference_from_curve,
    reference_map,
)
from ndtmap.indications.dgs import (
    DgsResult,
    backwall_reference_fsh,
    dgs_diagram,
    equivalent_fbh_diameter,
    far_field_fbh_diameter,
    sound_region_mask,
)
from ndtmap.indications.echoes import (
    EchoCheck,
    EchoFindings,
    classify_echoes,
    echo_half_length_mm,
)
from ndtmap.indications.flags import (
    FLAG_MEANINGS,
    FLAGS,
    SCREENING_UNDERMINED_BY,
    UNDERMINING_FLAGS,
    beam_size_flags,
    explain,
    is_low_snr,
    is_saturated,
    is_smaller_than_beam,
    noise_level_fsh,
    repeat_echo_notes,
)
from ndtmap.indications.options import (
    DetectionOptions,
    DgsOptions,
    FlagOptions,
    LossOptions,
    SizingOptions,
)
from ndtmap.indications.outline import OutlineProperties, SizedOutline, outline_properties
from ndtmap.indications.pipeline import (
    map_detection_level,
    scanned_area_mm2,
    size_indications,
)
from ndtmap.indications.record import (
    OPTIONAL_KEYS,
    RECORD_KEYS,
    IndicationRecord,
    largest_indication,
)
from ndtmap.indications.recording import (
    DGS_REFERENCES,
    RECORDING_KINDS,
    RecordingCurve,
    dgs_recording_curve,
)
from ndtmap.indications.rules import (
    QUANTITIES,
    DensityLimit,
    IndicationScreening,
    Limit,
    RecordingLevel,
    Rules,
    ScreeningResult,
    load_rules,
    parse_rules,
    screen,
)
from ndtmap.indications.screening import screen_records
from ndtmap.indications.sizing import (
    AreaResult,
    BeamCorrectedLength,
    LengthResult,
    beam_corrected_length,
    beam_width_at,
    drop_area,
    drop_factor,
    drop_length,
    level_area,
    level_length,
    point_reflector_range_at,
)
from ndtmap.indications.sizing_methods import (
    EDGE_METHOD,
    drop_outline,
    edge_maximum_outline,
    level_outline,
)
from ndtmap.indications.tables import (
    CSV_COLUMNS,
    format_value,
    indications_csv,
    indications_text,
)

__all__ = [
    "Indication",
    "detect_indications",
    "detect_backwall_loss",
    "indications_table",
    "reference_from_curve",
    "reference_map",
    "LengthResult",
    "AreaResult",
    "BeamCorrectedLength",
    "drop_length",
    "level_length",
    "drop_area",
    "level_area",
    "beam_corrected_length",
    "beam_width_at",
    "point_reflector_range_at",
    "drop_factor",
    "SizedOutline",
    "OutlineProperties",
    "outline_properties",
    "drop_outline",
    "edge_maximum_outline",
    "level_outline",
    "EDGE_METHOD",
    "DgsResult",
    "equivalent_fbh_diameter",
    "far_field_fbh_diameter",
    "backwall_reference_fsh",
    "sound_region_mask",
    "dgs_diagram",
    "FLAG_MEANINGS",
    "FLAGS",
    "SCREENING_UNDERMINED_BY",
    "UNDERMINING_FLAGS",
    "is_saturated",
    "is_smaller_than_beam",
    "beam_size_flags",
    "noise_level_fsh",
    "is_low_snr",
    "repeat_echo_notes",
    "explain",
    "classify_echoes",
    "echo_half_length_mm",
    "EchoCheck",
    "EchoFindings",
    "QUANTITIES",
    "RecordingLevel",
    "Limit",
    "DensityLimit",
    "Rules",
    "IndicationScreening",
    "ScreeningResult",
    "load_rules",
    "parse_rules",
    "screen",
    "screen_records",
    "size_indications",
    "scanned_area_mm2",
    "map_detection_level",
    "RecordingCurve",
    "RECORDING_KINDS",
    "DGS_REFERENCES",
    "dgs_recording_curve",
    "DetectionOptions",
    "LossOptions",
    "SizingOptions",
    "DgsOptions",
    "FlagOptions",
    "IndicationRecord",
    "largest_indication",
    "RECORD_KEYS",
    "OPTIONAL_KEYS",
    "CSV_COLUMNS",
    "indications_csv",
    "indications_text",
    "format_value",
]
