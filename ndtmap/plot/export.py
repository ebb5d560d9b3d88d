"""Writing figures to files: PNG, SVG, PDF through plotly's static export, HTML offline.

Static export uses kaleido, which drives a Chromium browser; on Debian,
``apt-get install chromium`` provides one (found at ``/usr/bin/chromium`` or
through ``BROWSER_PATH``). Starting the browser costs seconds, so a batch of
figures should be written inside one :func:`export_session`, which keeps a
single browser running. Every file is written atomically.
"""

from __future__ import annotations

import contextlib
import datetime as _dt
import html
import os
import re
import shutil
import textwrap
import threading
import warnings
from collections.abc import Iterator
from pathlib import Path
from typing import Any

from ndtmap.errors import FileFormatError
from ndtmap.io import atomic_write_bytes, atomic_write_text

__all__ = [
    "STATIC_FORMATS",
    "write_figure",
    "write_plotly_js",
    "export_session",
    "find_chromium",
    "figure_bytes",
    "stable_svg",
    "stable_pdf",
    "with_caption",
]

STATIC_FORMATS = ("png", "svg", "pdf")
#: Default size of static figures in CSS pixels, and the PNG scale (3 -> print resolution).
DEFAULT_WIDTH = 900
DEFAULT_HEIGHT = 650
PNG_SCALE = 3

_session_lock = threading.Lock()
_session_depth = 0


def find_chromium() -> str | None:
    """Path of a Chromium that kaleido can drive, or None."""
    env = os.environ.get("BROWSER_PATH")
    if env and Path(env).exists():
        return env
    for name in ("chromium", "chromium-browser", "google-chrome", "chrome"):
        found = shutil.which(name)
        if found:
            return found
    return None


def _no_browser() -> FileFormatError:
    return FileFormatError(
        "static figure export (PNG, SVG, PDF) needs a Chromium browser: install Debian's package "
        "(`apt-get install chromium`) or set BROWSER_PATH; HTML figures work without it"
    )


@contextlib.contextmanager
def export_session() -> Iterator[None]:
    """Keep one headless browser running while several figures are exported.

    Nested sessions share the outer one.

    Raises
    ------
    FileFormatError
        When no Chromium can be found.
    """
    global _session_depth
    if find_chromium() is None:
        raise _no_browser()
    import kaleido

    os.environ.setdefault("BROWSER_PATH", find_chromium() or "")
    with _session_lock:
        start = _session_depth == 0
        _session_depth += 1
    try:
        if start:
            kaleido.start_sync_server(silence_warnings=True)
        yield
    finally:
        with _session_lock:
            _session_depth -= 1
            stop = _session_depth == 0
        if stop:
            with contextlib.suppress(Exception):
                kaleido.stop_sync_server(silence_warnings=True)


def figure_bytes(
    fig: Any, fmt: str, *, width: int | None = None, height: int | None = None, scale: float | None = None
) -> bytes:
    """Render `fig` to PNG, SVG or PDF bytes.

    Parameters
    ----------
    fig : plotly.graph_objects.Figure
    fmt : {'png', 'svg', 'pdf'}
    width, height : int, optional
        Size in CSS pixels (defaults :data:`DEFAULT_WIDTH` x :data:`DEFAULT_HEIGHT`,
        or the figure's own layout size).
    scale : float, optional
        Pixel scale for PNG (default :data:`PNG_SCALE`: 900 x 650 CSS pixels
        become 2700 x 1950 pixels, 300 dpi when printed 23 cm wide).

    Raises
    ------
    FileFormatError
        For an unknown format or when the export fails (no browser).
    """
    fmt = fmt.lower().lstrip(".")
    if fmt not in STATIC_FORMATS:
        raise FileFormatError(f"`fmt` must be one of {STATIC_FORMATS}, got {fmt!r}")
    if find_chromium() is None:
        raise _no_browser()
    os.environ.setdefault("BROWSER_PATH", find_chromium() or "")
    w = width or fig.layout.width or DEFAULT_WIDTH
    h = height or fig.layout.height or DEFAULT_HEIGHT
    s = scale if scale is not None else (PNG_SCALE if fmt == "png" else 1)
    data = None
    for attempt in (1, 2):  # the browser behind kaleido can fail once on a loaded machine: one more try
        try:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")  # plotly warns that kaleido options are ignored in a server
                data = fig.to_image(format=fmt, width=int(w), height=int(h), scale=s)
            break
        except Exception as exc:  # noqa: BLE001 - kaleido raises many kinds; report one clear line
            if attempt == 2:
                raise FileFormatError(
                    f"static export to {fmt.upper()} failed twice: {type(exc).__name__}: {exc}") from None
    if fmt == "svg":
        return stable_svg(data)
    return stable_pdf(data) if fmt == "pdf" else data


def with_caption(fig: Any, caption: str, *, wrap: int = 110) -> Any:
    """A copy of `fig` with `caption` written in small italics under it (e.g. the caution of a saved figure).

    The figure grows by the caption's height, below the legend when the
    legend is under the plot.

    Examples
    --------
    >>> import plotly.graph_objects as go
    >>> out = with_caption(go.Figure(layout=dict(height=300)), "Not a decision.")
    >>> out.layout.height, out.layout.annotations[-1].text
    (344, '<i>Not a decision.</i>')
    """
    import plotly.graph_objects as go  # plotly is imported when a figure is made

    out = go.Figure(fig)
    h = int(out.layout.height or DEFAULT_HEIGHT)
    b = int(out.layout.margin.b if out.layout.margin.b is not None else 40)
    legend_below = out.layout.showlegend is not False and out.layout.legend.y is not None and out.layout.legend.y < 0
    below = b + (34 if legend_below else 0)
    out.update_layout(height=h + 44 + below - b, margin=dict(b=below + 44))
    text = "<br>".join(html.escape(line, quote=False) for line in textwrap.wrap(caption, wrap))
    out.add_annotation(text=f"<i>{text}</i>", xref="paper", yref="paper", x=0.0, y=0.0, yshift=-below - 4,
                       showarrow=False, xanchor="left", yanchor="top", font=dict(size=8, color="#444444"),
                       align="left")
    return out


_SVG_PLOT_UID = re.compile(rb'id="defs-([0-9a-f]{6})"')


def stable_svg(data: bytes) -> bytes:
    """Replace the random id plotly.js gives every plot in an SVG by a fixed one.

    plotly.js names the clip paths and gradients of a plot after a random
    six-digit hex id, so two exports of the same figure differ; with the id
    fixed (and trace ``uid`` set, as every figure of :mod:`ndtmap.plot` has) the same
    figure gives the same bytes.

    Examples
    --------
    >>> stable_svg(b'<defs id="defs-3fa9c1"/><g clip-path="url(#clip3fa9c1xy)"/>')
    b'<defs id="defs-000000"/><g clip-path="url(#clip000000xy)"/>'
    """
    found = _SVG_PLOT_UID.search(data)
    if not found:
        return data
    uid = re.escape(found.group(1))
    return re.sub(rb"(?<=[A-Za-z#-])" + uid, b"000000", data)


def write_figure(
    fig: Any,
    path: str | os.PathLike[str],
    *,
    width: int | None = None,
    height: int | None = None,
    scale: float | None = None,
    plotlyjs: str | bool = True,
) -> Path:
    """Write `fig` to `path`; the format follows the extension (.png, .svg, .pdf, .html).

    Parameters
    ----------
    fig : plotly.graph_objects.Figure
    path : path-like
        Output file; its folder must exist.
    width, height, scale
        See :func:`figure_bytes`.
    plotlyjs : bool or str, default True
        For HTML: True embeds plotly.js (the file works offline on its own);
        ``"directory"`` refers to a ``plotly.min.js`` beside the file (see
        :func:`write_plotly_js`), as reports do to ship the script once.

    Returns
    -------
    pathlib.Path

    Raises
    ------
    FileFormatError
        For an unknown extension, a missing folder or a failed export; no
        partial file is left behind.
    """
    p = Path(path)
    ext = p.suffix.lower().lstrip(".")
    if ext == "html":
        page = fig.to_html(full_html=True, include_plotlyjs=plotlyjs, config={"displaylogo": False, "responsive": True})
        return atomic_write_text(p, page)
    if ext not in STATIC_FORMATS:
        raise FileFormatError(f"figure files must end in .png, .svg, .pdf or .html, got {str(p)!r}")
    return atomic_write_bytes(p, figure_bytes(fig, ext, width=width, height=height, scale=scale))


def write_plotly_js(folder: str | os.PathLike[str]) -> Path:
    """Write ``plotly.min.js`` (from the installed plotly package) into `folder`, for offline HTML."""
    from plotly.offline import get_plotlyjs

    return atomic_write_text(Path(folder) / "plotly.min.js", get_plotlyjs())


_PDF_DATE = re.compile(rb"/(CreationDate|ModDate) \(D:\d{14}[^)]{0,12}\)")


def stable_pdf(data: bytes) -> bytes:
    """Fix the creation and modification dates the browser writes into a PDF.

    The dates become ``SOURCE_DATE_EPOCH`` (the reproducible-builds
    convention) when that variable is set, else 1970-01-01 00:00 UTC, so the
    same figure gives the same bytes; the value keeps its length, so the
    byte offsets of the file stay valid.

    Examples
    --------
    >>> stable_pdf(b"<< /CreationDate (D:20261201214222+00'00') >>")
    b"<< /CreationDate (D:19700101000000+00'00') >>"
    """
    try:
        epoch = int(os.environ.get("SOURCE_DATE_EPOCH", "0"))
    except ValueError:
        epoch = 0
    stamp = _dt.datetime.fromtimestamp(epoch, _dt.UTC).strftime("%Y%m%d%H%M%S").encode()

    def fix(m: re.Match[bytes]) -> bytes:
        old = m.group(0)
        new = b"/" + m.group(1) + b" (D:" + stamp + b"+00'00')"
        return new if len(new) == len(old) else old

    return _PDF_DATE.sub(fix, data)
