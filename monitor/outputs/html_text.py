"""Text from outside (historian values, names people typed) in HTML pages and reports.

One helper, `html_text`, for every page and report: a value can never become markup,
script or a control character there. HTML's special characters become entities
(``& < > " '``, safe in text and in quoted attributes); every character that is not
printable (controls, escape, bidirectional overrides, line and paragraph separators,
unassigned code points) is written as its escape (``\\x1b``, ``\\u202e``) and a
backslash as ``\\\\``, the notation the terminal screens use, so `from_html_text`
gives the exact value back.
"""

from __future__ import annotations

import html
import re

_ESCAPE = re.compile(r"\\(\\|x[0-9a-f]{2}|u[0-9a-f]{4}|U[0-9a-f]{8})")


def _visible(c: str) -> str:
    if c == "\\":
        return "\\\\"
    if c.isprintable():
        return c
    code = ord(c)
    if code < 0x100:
        return f"\\x{code:02x}"
    if code < 0x10000:
        return f"\\u{code:04x}"
    return f"\\U{code:08x}"


def html_text(value: object) -> str:
    """``value`` as HTML text (or a quoted attribute's value): shown, never interpreted.

    Examples
    --------
    >>> html_text("<script>alert('B1')</script>")
    '&lt;script&gt;alert(&#x27;B1&#x27;)&lt;/script&gt;'
    >>> html_text("B\\x1b[31m1 & co")
    'B\\\\x1b[31m1 &amp; co'
    """
    text = "" if value is None else str(value)
    return html.escape("".join(map(_visible, text)), quote=True)


def from_html_text(markup: str) -> str:
    """The value `html_text` wrote (its exact inverse)."""

    def back(m: re.Match) -> str:
        body = m.group(1)
        return "\\" if body == "\\" else chr(int(body[1:], 16))

    return _ESCAPE.sub(back, html.unescape(markup))
