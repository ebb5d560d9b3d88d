"""The workbench in a real browser: JupyterLab runs the quick-start notebook in headless Chromium.

Checks that the plan view renders with heatmap data, that typing a gate end in the Gates panel
redraws the map, that pressing the threshold slider moves the gate on the A-scan, and that a click
inside the plan view shows the A-scan at that position. Needs Debian's Chromium
(``/usr/bin/chromium``) and Python Playwright; skipped without them unless
``NDTMAP_REQUIRE_BROWSER=1`` (then it fails). A screenshot is saved under ``test-artifacts/``;
with ``NDTMAP_UPDATE_DOCS_IMAGES=1`` the workbench's picture in ``docs/images/workbench.png`` is
refreshed from the run.
"""

from __future__ import annotations

import os
import shutil
from pathlib import Path

import pytest
from helpers.jupyter_browser import (
    CHROMIUM,
    CHROMIUM_ARGS,
    chromium_available,
    delete_sessions,
    jupyterlab_server,
    open_and_run_notebook,
)

pytestmark = pytest.mark.browser

ROOT = Path(__file__).resolve().parents[2]
NOTEBOOK = "01_quick_start.ipynb"
ARTIFACTS = ROOT / "test-artifacts"

# the workbench's figures, found by the `meta` the workbench gives their layouts
FIND = """(meta) => [...document.querySelectorAll('.ndtmap-workbench .js-plotly-plot')]
                      .find(e => e.layout && e.layout.meta === meta)"""
PLAN_SUM = f"""() => {{
  const el = ({FIND})('ndtmap-plan');
  if (!el || !el.data || !el.data.length || el.data[0].type !== 'heatmap' || !el.data[0].z) return null;
  let s = 0, n = 0;
  for (const row of el.data[0].z) for (const v of row) if (Number.isFinite(v)) {{ s += v; n += 1; }}
  return n > 0 && el.querySelector('.main-svg') ? [s, n] : null;
}}"""


def _need_browser() -> None:
    reason = None
    if not chromium_available():
        reason = f"no Chromium at {CHROMIUM} (apt-get install chromium)"
    else:
        try:
            import playwright.sync_api  # noqa: F401
        except ImportError:
            reason = "Python Playwright is not installed (pip install playwright)"
    if reason is not None:
        if os.environ.get("NDTMAP_REQUIRE_BROWSER") == "1":
            pytest.fail(f"NDTMAP_REQUIRE_BROWSER=1 but {reason}")
        pytest.skip(reason)


def _click_at(page, meta: str, x_mm: float, y_mm: float) -> None:
    """Click the plot `meta` at data coordinates (x_mm, y_mm), computed from plotly's axes."""
    page.evaluate(f"() => ({FIND})('{meta}').scrollIntoView({{block: 'center'}})")
    x, y = page.evaluate(
        f"""([x, y]) => {{
          const el = ({FIND})('{meta}');
          const xa = el._fullLayout.xaxis, ya = el._fullLayout.yaxis;
          const box = el.getBoundingClientRect();
          return [box.left + xa._offset + xa.l2p(x), box.top + ya._offset + ya.l2p(y)];
        }}""",
        [x_mm, y_mm],
    )
    page.mouse.click(x, y)


def test_workbench_renders_follows_gate_edits_and_clicks(tmp_path):
    _need_browser()
    from playwright.sync_api import sync_playwright

    lab = tmp_path / "lab"
    lab.mkdir()
    shutil.copy(ROOT / "notebooks" / NOTEBOOK, lab / NOTEBOOK)  # JupyterLab may save outputs: work on a copy
    ARTIFACTS.mkdir(exist_ok=True)
    with jupyterlab_server(lab, tmp_path / "scratch") as (base, token), sync_playwright() as pw:
        browser = pw.chromium.launch(executable_path=CHROMIUM, args=CHROMIUM_ARGS, headless=True)
        page = browser.new_page(viewport={"width": 1500, "height": 1250})
        try:
            open_and_run_notebook(page, base, token, NOTEBOOK, timeout_s=150)
            page.evaluate("() => window.jupyterapp.commands.execute('application:toggle-left-area')")

            # the plan view renders, with heatmap data
            page.wait_for_function(PLAN_SUM, timeout=60_000)
            before = page.evaluate(PLAN_SUM)
            colour_bar = page.evaluate(f"() => ({FIND})('ndtmap-plan').data[0].colorbar.title.text")
            assert "[%FSH]" in colour_bar

            # a gate edit in the Gates panel redraws the map: the flaw gate ends at 15 mm, above L2 (17 mm)
            end_box = page.locator(".ndtmap-workbench .ndtmap-gate-end input")
            end_box.scroll_into_view_if_needed()
            end_box.fill("15")
            end_box.press("Enter")
            page.wait_for_function(f"(b) => {{ const s = ({PLAN_SUM})(); return s && s[0] !== b[0]; }}", arg=before,
                                   timeout=30_000)
            after = page.evaluate(PLAN_SUM)
            assert after[0] < before[0]  # less echo in a shorter gate

            # the threshold slider: one press of ArrowRight moves the gate on the A-scan by one step
            handle = page.locator(".ndtmap-workbench .ndtmap-gate-threshold .noUi-handle")
            handle.scroll_into_view_if_needed()
            handle.focus()
            handle.press("ArrowRight")
            page.wait_for_function(
                f"""() => {{ const el = ({FIND})('ndtmap-ascan');
                    const g = el && el.data.find(t => (t.name || '').startsWith('flaw'));
                    return g && g.y[3] === 10.5; }}""", timeout=30_000)  # the bar's level: its middle segment

            # a click on lamination L1 in the plan view shows the A-scan there
            _click_at(page, "ndtmap-plan", 37.5, 24.0)
            page.wait_for_function(
                f"""() => {{ const el = ({FIND})('ndtmap-ascan');
                    const a = el && el.data.find(t => (t.name || '').startsWith('A-scan'));
                    return a && el.layout.title.text.includes('scan 37.50 mm, index 24.00 mm') && a.y.length > 0;
                }}""", timeout=30_000)
            n = page.evaluate(f"() => ({FIND})('ndtmap-ascan').data.find(t => t.name.startsWith('A-scan')).y.length")
            assert n == 701  # every sample of the A-scan (plate_laminations.nc has 701)
            page.wait_for_function(  # the B-scan moved to the clicked index position
                f"() => ({FIND})('ndtmap-bscan').layout.title.text.includes('at index 24.00 mm')", timeout=30_000)
            page.mouse.move(5, 5)  # no hover label in the picture
            page.wait_for_timeout(800)
            page.screenshot(path=str(ARTIFACTS / "workbench-browser.png"), full_page=True)
            page.locator(".ndtmap-workbench").screenshot(path=str(ARTIFACTS / "workbench.png"))
            if os.environ.get("NDTMAP_UPDATE_DOCS_IMAGES") == "1":
                (ROOT / "docs" / "images").mkdir(parents=True, exist_ok=True)
                shutil.copy(ARTIFACTS / "workbench.png", ROOT / "docs" / "images" / "workbench.png")
        except Exception:
            page.screenshot(path=str(ARTIFACTS / "workbench-browser-failure.png"), full_page=True)
            raise
        finally:
            delete_sessions(base, token)
            browser.close()
