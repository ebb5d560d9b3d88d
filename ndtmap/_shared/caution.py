"""The one caution text every result of ndtmap carries (also :data:`ndtmap.CAUTION`).

A module of its own, without imports, so that the package top, the command
line and the report can all use it without loading anything heavy.
"""

__all__ = ["CAUTION"]

#: Said wherever ndtmap shows or writes results: the review and the decision belong to people.
CAUTION = (
    "Results must be reviewed by qualified personnel (e.g. certified to ISO 9712 or the "
    "employer's scheme) and accepted under the applicable code, contract and local "
    "regulations. ndtmap makes no acceptance decision."
)
