"""Inert display of text that a person typed or a file carried.

Notes, record names and metadata may contain terminal escape sequences or
Textual/Rich markup. :func:`inert` makes every control character visible
(``\\x1b`` becomes the four characters ``\\x1b``) so that nothing is
interpreted by the terminal. Markup is neutralised separately by the app,
which renders such strings as plain ``rich.text.Text`` (never as markup).
"""

from __future__ import annotations

import re

# C0 controls (except none), DEL, C1 controls, plus Unicode format characters
# such as bidirectional overrides (category Cf) that can disguise text.
_CONTROL = re.compile(r"[\x00-\x1f\x7f-\x9f\u061c\u200b-\u200f\u202a-\u202e\u2066-\u2069\ufeff]")


def _escape(match: re.Match) -> str:
    ch = match.group(0)
    code = ord(ch)
    if code <= 0xFF:
        return f"\\x{code:02x}"
    return f"\\u{code:04x}"


def inert(value: object, max_len: int | None = None) -> str:
    """Return ``value`` as a string with every control character made visible.

    Parameters
    ----------
    value : object
        Anything; it is converted with ``str``.
    max_len : int, optional
        If given, the result is cut to this many characters with a trailing
        ellipsis.

    Examples
    --------
    >>> inert("ok\\x1b[31mred")
    'ok\\\\x1b[31mred'
    """
    text = _CONTROL.sub(_escape, str(value))
    if max_len is not None and len(text) > max_len:
        text = text[: max(0, max_len - 1)] + "…"
    return text
