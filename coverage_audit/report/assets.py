"""Offline web assets of the map: Leaflet from the installed package, our own JS and CSS.

Takes nothing but the installed ``xstatic-leaflet`` package and gives the text that
``map.py`` inlines into ``map.html``: Leaflet's JavaScript (source-map comment removed)
and CSS (its control images turned into ``data:`` URIs, so the page makes no request of
any kind when opened from disk), plus the project's own stylesheet and the drawing script
``coverageAuditDraw(map, data)``. Leaflet is read from the installed wheel at build time
and never copied into the repository.
"""

from __future__ import annotations

import base64
import re
from functools import lru_cache
from importlib import resources
from pathlib import Path

from ..errors import InputError

__all__ = [
    "LEAFLET_VERSION",
    "MAP_CSS",
    "MAP_JS",
    "inline_script",
    "inline_style",
    "leaflet_css",
    "leaflet_dir",
    "leaflet_js",
]


def leaflet_dir() -> Path:
    """Return the folder of the installed Leaflet distribution (``xstatic-leaflet``).

    Raises
    ------
    InputError
        When ``xstatic-leaflet`` is not installed.
    """
    try:
        from xstatic.pkg import leaflet
    except ImportError as exc:  # pragma: no cover - it is a declared dependency
        raise InputError(
            "the offline map needs Leaflet from the 'xstatic-leaflet' package; "
            "install it with: pip install xstatic-leaflet"
        ) from exc
    return Path(leaflet.BASE_DIR)


def _leaflet_version() -> str:
    try:
        from xstatic.pkg import leaflet
    except ImportError:  # pragma: no cover
        return "unknown"
    return str(leaflet.VERSION)


LEAFLET_VERSION: str = _leaflet_version()

_SOURCE_MAP = re.compile(r"^\s*//# sourceMappingURL=.*$", re.MULTILINE)
_CSS_IMAGE = re.compile(r"url\((['\"]?)(images/[A-Za-z0-9_.-]+\.png)\1\)")


@lru_cache(maxsize=1)
def leaflet_js() -> str:
    """Return Leaflet's minified JavaScript, without its source-map comment.

    The comment is dropped because developer tools would otherwise try to load the map
    file next to ``map.html``, which does not exist there.
    """
    text = (leaflet_dir() / "leaflet.js").read_text(encoding="utf-8")
    return _SOURCE_MAP.sub("", text)


@lru_cache(maxsize=1)
def leaflet_css() -> str:
    """Return Leaflet's CSS with its ``images/*.png`` references inlined as data URIs."""
    base = leaflet_dir()
    text = (base / "leaflet.css").read_text(encoding="utf-8")

    def to_data_uri(match: re.Match[str]) -> str:
        data = (base / match.group(2)).read_bytes()
        return "url(data:image/png;base64," + base64.b64encode(data).decode("ascii") + ")"

    return _CSS_IMAGE.sub(to_data_uri, text)


def inline_script(code: str) -> str:
    """Wrap JavaScript in a ``<script>`` element, refusing text that would end it early."""
    if re.search(r"</script", code, re.IGNORECASE):
        raise InputError("script text contains '</script' and cannot be inlined safely")
    return "<script>\n" + code + "\n</script>"


def inline_style(css: str) -> str:
    """Wrap CSS in a ``<style>`` element, refusing text that would end it early."""
    if re.search(r"</style", css, re.IGNORECASE):
        raise InputError("style text contains '</style' and cannot be inlined safely")
    return "<style>\n" + css + "\n</style>"


#: The project's own map stylesheet. The neutral background keeps the map readable when
#: no base tiles are loaded (the default, since tiles need the network).
MAP_CSS = """
.leaflet-container { background: #eeede8; font: 13px/1.35 system-ui, -apple-system,
  "Segoe UI", Roboto, "Helvetica Neue", Arial, sans-serif; }
.ca-panel { background: rgba(255,255,255,0.94); border-radius: 4px; padding: 8px 10px;
  box-shadow: 0 1px 4px rgba(0,0,0,0.3); color: #1f1f1f; max-width: 320px; }
.ca-title h1 { font-size: 15px; margin: 0 0 2px 0; }
.ca-title p { margin: 0; color: #444; font-size: 12px; }
.ca-title p.ca-finding { max-width: 360px; margin-top: 4px; color: #222; font-weight: 600; }
.ca-legend h2, .ca-hover h2 { font-size: 13px; margin: 0 0 4px 0; }
.ca-legend .ca-note { font-size: 11px; color: #555; margin: 2px 0 4px 0; }
.ca-legend ul { list-style: none; margin: 0 0 6px 0; padding: 0; }
.ca-legend li { display: flex; align-items: center; margin: 1px 0; }
.ca-swatch { display: inline-block; width: 16px; height: 12px; margin-right: 6px;
  border: 1px solid rgba(0,0,0,0.35); flex: none; }
.ca-swatch.ca-line { background: transparent; border: 2px solid #111; height: 8px; }
.ca-swatch.ca-dash { background: transparent; border: 2px dashed #111; height: 8px; }
.ca-swatch.ca-dot { border-radius: 50%; width: 10px; height: 10px; margin: 0 9px 0 3px; }
.ca-hover { min-width: 220px; }
.ca-hover table { border-collapse: collapse; }
.ca-hover th { text-align: left; font-weight: normal; color: #555; padding: 0 8px 0 0; }
.ca-hover td { text-align: right; font-variant-numeric: tabular-nums; }
.ca-hover .ca-hint { color: #555; margin: 0; }
.ca-enclave-label { background: rgba(255,255,255,0.85); border: 1px solid #111;
  font-weight: 600; padding: 0 4px; box-shadow: none; }
.ca-enclave-label:before { border-top-color: #111; }
@media (max-width: 600px) { .ca-panel { max-width: 200px; font-size: 11px; } }
"""


#: The drawing script (``map.js``, package data). Every value that comes from input files
#: is put on the page with ``textContent`` or passed through ``esc`` where Leaflet would use
#: ``innerHTML``, so a name such as ``<script>...</script>`` shows as text and never runs.
MAP_JS: str = (
    resources.files("coverage_audit.report").joinpath("map.js").read_text(encoding="utf-8")
)
