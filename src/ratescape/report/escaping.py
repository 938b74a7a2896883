"""Escaping helpers that keep untrusted strings inert in generated HTML.

Project ids and names come from users' CSV files, so every string that
reaches the report is treated as hostile. Two contexts matter:

* HTML text and attribute values: :func:`escape_html` (``&``, ``<``, ``>``,
  ``"`` and ``'`` become character references).
* Data inside a ``<script>`` element: the HTML tokenizer ends a script
  element at the first ``</script`` whatever the JavaScript or JSON around
  it says, so JSON placed there must not contain a literal ``<``.
  :func:`json_for_script` writes ``<``, ``>``, ``&``, U+2028 and U+2029 as
  JSON ``\\u`` escapes, which parse back to the same characters.

Altair's own HTML writer and vl-convert's ``vegalite_to_html`` place the
chart specification into a script block unescaped; ratescape never uses
them for output.
"""

from __future__ import annotations

import html
import json
import math
import re
from typing import Any

__all__ = [
    "escape_html",
    "json_for_script",
    "json_script_block",
    "check_inline_script",
    "sanitize_json_value",
]

# JSON text may hold these characters only inside strings, so replacing
# them by their \u escapes keeps the JSON equivalent.  Common practice
# (the same escapes are used by Django's json_script and Rails' json_escape).
_SCRIPT_ESCAPES = {
    "<": "\\u003c",
    ">": "\\u003e",
    "&": "\\u0026",
    "\u2028": "\\u2028",
    "\u2029": "\\u2029",
}
_SCRIPT_ESCAPE_RE = re.compile("[<>&\u2028\u2029]")
_SAFE_ID_RE = re.compile(r"^[A-Za-z][A-Za-z0-9_-]*$")


def escape_html(value: Any) -> str:
    """Return ``value`` as text safe inside an HTML element or quoted attribute.

    Parameters
    ----------
    value : object
        Anything; ``None`` gives the empty string, other values use ``str``.

    Returns
    -------
    str
        The text with ``& < > " '`` replaced by character references.

    Examples
    --------
    >>> escape_html('<b>"A&B"</b>')
    '&lt;b&gt;&quot;A&amp;B&quot;&lt;/b&gt;'
    >>> escape_html(None)
    ''
    """
    if value is None:
        return ""
    return html.escape(str(value), quote=True)


def sanitize_json_value(value: Any) -> Any:
    """Return a copy of ``value`` with non-finite floats replaced by ``None``.

    JSON has no NaN or infinity; a missing worth is written as ``null``.

    Parameters
    ----------
    value : object
        Nested dicts, lists, tuples and scalars.

    Returns
    -------
    object
        The same structure (tuples become lists).

    Examples
    --------
    >>> sanitize_json_value({"a": [1.0, float("nan")], "b": float("inf")})
    {'a': [1.0, None], 'b': None}
    """
    if isinstance(value, float):
        return value if math.isfinite(value) else None
    if isinstance(value, dict):
        return {str(k): sanitize_json_value(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [sanitize_json_value(v) for v in value]
    return value


def json_for_script(obj: Any) -> str:
    """Serialise ``obj`` to JSON that is inert inside an HTML ``<script>`` element.

    Parameters
    ----------
    obj : object
        A JSON-serialisable structure. Non-finite floats become ``null``.

    Returns
    -------
    str
        Compact JSON in which ``<``, ``>``, ``&``, U+2028 and U+2029 are
        written as ``\\u003c``, ``\\u003e``, ``\\u0026``, ``\\u2028`` and
        ``\\u2029``. ``json.loads`` of the result equals the input.

    Notes
    -----
    These five characters can occur in JSON text only inside string
    literals, so the replacement never changes the parsed value. With no
    literal ``<`` the text cannot contain ``</script`` or ``<!--``, the two
    sequences that change the HTML tokenizer's state inside a script
    element (WHATWG HTML Living Standard, section "Restrictions for
    contents of script elements").

    Examples
    --------
    >>> json_for_script({"name": "</script><b>&"})
    '{"name":"\\\\u003c/script\\\\u003e\\\\u003cb\\\\u003e\\\\u0026"}'
    """
    try:      # most structures have no NaN: written as they are, without a sanitised copy
        text = json.dumps(obj, ensure_ascii=False, allow_nan=False, separators=(",", ":"))
    except ValueError:
        text = json.dumps(sanitize_json_value(obj), ensure_ascii=False, allow_nan=False, separators=(",", ":"))
    return _SCRIPT_ESCAPE_RE.sub(lambda m: _SCRIPT_ESCAPES[m.group(0)], text)


def json_script_block(obj: Any, element_id: str, **data_attributes: str) -> str:
    """Return a ``<script type="application/json">`` element holding ``obj``.

    Parameters
    ----------
    obj : object
        JSON-serialisable data (see :func:`json_for_script`).
    element_id : str
        The element's id: a letter followed by letters, digits, ``_`` or
        ``-`` (ids are made by the program, never by users).
    **data_attributes : str
        Extra ``data-*`` attributes; ``chart="x"`` becomes ``data-chart="x"``.
        Values are HTML-escaped.

    Returns
    -------
    str
        The element. Browsers do not execute ``application/json`` blocks;
        page scripts read them with ``JSON.parse(el.textContent)``.

    Raises
    ------
    ValueError
        If ``element_id`` or an attribute name is not a plain identifier.

    Examples
    --------
    >>> json_script_block([1, "<"], "spec-1", chart="c1")
    '<script type="application/json" id="spec-1" data-chart="c1">[1,"\\\\u003c"]</script>'
    """
    if not _SAFE_ID_RE.match(element_id):
        raise ValueError(f"element_id must match {_SAFE_ID_RE.pattern!r}, got {element_id!r}")
    attrs = ""
    for key, val in data_attributes.items():
        if not _SAFE_ID_RE.match(key):
            raise ValueError(f"attribute name must match {_SAFE_ID_RE.pattern!r}, got {key!r}")
        attrs += f' data-{key.replace("_", "-")}="{escape_html(val)}"'
    return (
        f'<script type="application/json" id="{element_id}"{attrs}>'
        f"{json_for_script(obj)}</script>"
    )


def check_inline_script(source: str) -> str:
    """Return ``source`` unchanged if it can be inlined in a ``<script>`` element.

    Parameters
    ----------
    source : str
        JavaScript text written by the program or shipped by a library.

    Returns
    -------
    str
        ``source``.

    Raises
    ------
    ValueError
        If ``source`` contains ``</script`` or ``<!--`` (any case), which
        would end or disturb the script element.

    Examples
    --------
    >>> check_inline_script("var a = 1 < 2;")
    'var a = 1 < 2;'
    """
    lowered = source.lower()
    for bad in ("</script", "<!--"):
        if bad in lowered:
            raise ValueError(
                f"script text contains {bad!r} at offset {lowered.index(bad)}; "
                "it cannot be inlined in a <script> element"
            )
    return source
