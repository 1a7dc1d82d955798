"""The JavaScript that draws the report's charts, taken from vl-convert: no network, ever.

vl-convert-python ships Vega, Vega-Lite and vega-embed compiled into its
extension; :func:`javascript_bundle` asks it for one self-contained script
that defines ``vegaEmbed``, ``vega`` and ``vegaLite`` on ``window``. The
report inlines that script, so a report opens offline with a double-click.

The bundle mentions a few web addresses as plain text. None is ever
requested: they are XML namespace names, schema identifiers written into
compiled specs, a link inside an error message, and the address behind
vega-embed's "open in editor" action, which the report switches off.
:data:`INERT_ADDRESSES` lists them; the tests check that no other address
appears.
"""

from __future__ import annotations

import functools
import re

import altair as alt
import vl_convert

INERT_ADDRESSES = (
    "http://www.w3.org/2000/svg",
    "http://www.w3.org/1999/xlink",
    "http://www.w3.org/2000/xmlns/",
    "https://vega.github.io/schema/vega/v",
    "https://vega.github.io/schema/vega-lite/v",
    "https://github.com/vega/vega-lite/issues/",
    "https://vega.github.io/editor/",
)

_ADDRESS = re.compile(r"https?://[^\s\"'`)<>]*")


def vegalite_version() -> str:
    """The Vega-Lite version of the installed Altair ("6.4") if vl-convert has it, else its newest."""
    available = list(vl_convert.get_vegalite_versions())
    wanted = ".".join(alt.SCHEMA_VERSION.lstrip("v").split(".")[:2])
    return wanted if wanted in available else available[-1]


@functools.lru_cache(maxsize=4)
def javascript_bundle(version: str | None = None) -> str:
    """Vega, Vega-Lite and vega-embed as one script, safe to place inside a <script> element."""
    bundle = vl_convert.javascript_bundle(vl_version=version or vegalite_version())
    # "</script" inside the code would end the element early; "<\/" means the same to JavaScript
    return bundle.replace("</script", "<\\/script").replace("</SCRIPT", "<\\/SCRIPT")


def addresses(text: str) -> list:
    """Every http(s) address written in ``text``."""
    return _ADDRESS.findall(text)


def is_inert(address: str) -> bool:
    """True for the addresses of :data:`INERT_ADDRESSES` (and versions of the schema names)."""
    return any(address.startswith(known) for known in INERT_ADDRESSES)
