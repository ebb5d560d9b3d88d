"""The batch summary says when validity flags leave a part's screening open."""

from pathlib import Path

from ndtmap.report.pages import _rules_cell
from ndtmap.report.results import PartReport


def _part(exceeded, screening):
    return PartReport(source="p.nc", part_id="P", folder=Path("p"), index_html=Path("p/index.html"),
                      n_indications=2, n_amplitude=2, n_backwall_loss=0, largest=None, rules_exceeded=exceeded,
                      screening=screening, first_look=False, figures=(), notes=())


def test_rules_cell_states_review_required():
    # a part with review required never reads "none" alone in the summary
    assert _rules_cell(_part((), None)) == "no rules"
    assert _rules_cell(_part((), "within rules")) == "none"
    assert _rules_cell(_part(("long",), "exceeds rule long")) == "long"
    open_only = _part((), "not screened: review required (indication 2: at_scan_edge)")
    assert _rules_cell(open_only) == "none; review required (validity flags)"
    both = _part(("long",), "exceeds rule long; not screened: review required (indication 2: at_scan_edge)")
    assert _rules_cell(both) == "long; review required (validity flags)"
