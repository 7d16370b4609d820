"""Chart files and the script the HTML page inlines, all through vl-convert (a Rust build
of Vega and Vega-Lite): no browser, no network.

The page carries Vega specs (compiled from Vega-Lite here, the same compile the PNG and
SVG files come from) and the Vega-Embed bundle (Vega, Vega-Lite, Vega-Embed; about
0.9 MB), used in its "vega" mode with no action menu. (A bundle of Vega alone would be
smaller, but vl-convert's snippet bundler binds ``vega`` to an empty default export, so
``window.vega`` would be null; ``vegaEmbed`` is bound properly.) Nothing in the page may
name an http(s) address: the runtime's SVG namespace strings and its editor link are
kept, but written with escaped slashes (``http:\\/\\/``), which JavaScript reads as the
very same string.
"""

from __future__ import annotations

import re
from functools import cache
from pathlib import Path
from typing import Any

VEGA_GLOBAL = "window.vegaEmbed = vegaEmbed;"
_URL = re.compile(r"(https?):(//|\\/\\/)")


def strip_schema(spec: Any) -> Any:
    """A spec without its ``$schema`` URL (a volatile field, and an http reference)."""
    if isinstance(spec, dict):
        return {k: strip_schema(v) for k, v in spec.items() if k != "$schema"}
    if isinstance(spec, list):
        return [strip_schema(v) for v in spec]
    return spec


def to_vega(vl_spec: dict[str, Any]) -> dict[str, Any]:
    import vl_convert as vlc

    return strip_schema(vlc.vegalite_to_vega(strip_schema(vl_spec)))  # type: ignore[no-any-return]


def write_chart(vl_spec: dict[str, Any], stem: Path) -> tuple[Path, Path]:
    """``stem.svg`` and ``stem.png`` (2x scale) of one Vega-Lite spec."""
    import vl_convert as vlc

    spec = strip_schema(vl_spec)
    svg, png = stem.with_suffix(".svg"), stem.with_suffix(".png")
    svg.write_text(vlc.vegalite_to_svg(spec), encoding="utf-8")
    png.write_bytes(vlc.vegalite_to_png(spec, scale=2))
    return svg, png


@cache
def vega_runtime() -> str:
    """The Vega-Embed bundle as one script (about 0.9 MB), safe to inline in ``<script>``:
    no http(s) address and no ``</script``. Built once per process (a few seconds)."""
    import vl_convert as vlc

    js = vlc.javascript_bundle(VEGA_GLOBAL)
    js = _URL.sub(lambda m: m.group(1) + ":\\/\\/", js)
    if re.search(r"</script", js, re.IGNORECASE) or "<!--" in js:
        raise RuntimeError("the Vega bundle cannot be inlined: it holds '</script' or '<!--'")
    return js
