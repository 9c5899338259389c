"""Untrusted text made safe for each output: the terminal, Markdown, plot labels, JSON.

Codec names, source specs, codec versions and ledger paths come from users' code
or from a ledger file and may hold ANSI escape sequences, other control
characters, bidi overrides, HTML, Markdown links or table pipes. Every place
that shows them goes through one of these functions; the JSON reports keep the
raw text (``json.dumps`` escapes it) but never NaN or Infinity.
"""

from __future__ import annotations

import math
import re
import unicodedata
from collections.abc import Mapping
from typing import Any

__all__ = ["json_safe", "markdown_text", "md_name", "plot_text", "terminal_text"]

#: Unicode general categories shown escaped: control (Cc: C0, DEL, C1), format (Cf: the
#: bidi embeddings/overrides/isolates U+202A-U+202E and U+2066-U+2069, the marks
#: U+200E/U+200F and U+061C, zero-width characters, tag characters), lone surrogates (Cs,
#: which a JSON ledger can hold and no UTF-8 stream can print) and the line and paragraph
#: separators (Zl, Zp). Escaping rather than deleting them is common practice for logs
#: and terminals: the reader still sees that something was there.
_ESCAPED_CATEGORIES = frozenset({"Cc", "Cf", "Cs", "Zl", "Zp"})

#: ASCII punctuation that Markdown gives a meaning to where it could matter inside a line:
#: links and images (``[ ] ( ) !``), emphasis and strike-through (``* _ ~``), code spans
#: (backtick), GFM table cells (``|``), headings and list markers (``# +``), attribute or
#: template braces (``{ }``), GitHub math (``$``), URL schemes (``:``) and the escape
#: character itself. The CommonMark spec (section "Backslash escapes") lets any ASCII
#: punctuation character be backslash-escaped, and an escaped one renders as itself.
_MARKDOWN_PUNCTUATION = "\\`*_{}[]()#+!|~$:"
#: ``& < >`` become character references instead (CommonMark "Entity and numeric
#: character references"), so no HTML tag or entity of the input is ever interpreted.
_MARKDOWN_TABLE = {
    **{ord(c): "\\" + c for c in _MARKDOWN_PUNCTUATION},
    ord("&"): "&amp;", ord("<"): "&lt;", ord(">"): "&gt;",
}


def _escaped(ch: str) -> str:
    code = ord(ch)
    if code < 0x100:
        return f"\\x{code:02x}"
    if code < 0x10000:
        return f"\\u{code:04x}"
    return f"\\U{code:08x}"


def terminal_text(s: str) -> str:
    """``s`` safe to print on a terminal: invisible and control characters shown escaped.

    C0 and C1 control characters, DEL, Unicode format characters (bidi overrides
    and isolates such as U+202E and U+2066-U+2069, the marks U+200E/U+200F,
    zero-width characters), lone surrogates and the line/paragraph separators
    are written as Python-style escapes (``\\x1b``, ``\\u202e``), so an ANSI
    sequence, a terminal hyperlink or a bidi override in a codec name is shown,
    not obeyed; the result is always one line. Printable text (any script,
    spaces, backslashes) is returned unchanged.
    """
    if s.isprintable():  # fast path: no character of an escaped category
        return s
    return "".join(_escaped(c) if unicodedata.category(c) in _ESCAPED_CATEGORIES else c
                   for c in s)


#: What would still open a block at the start of a line once the punctuation above is
#: escaped: a bullet, thematic break or setext underline (``-``, ``=``), an ordered-list
#: number followed by a space or nothing (``1. ``; CommonMark "List items" allows up to nine
#: digits; ``)`` is escaped already).
_BLOCK_START = re.compile(r"^([-=]|[0-9]{1,9}\.(?= |$))")


def markdown_text(s: str) -> str:
    """``s`` as Markdown that renders as the literal text, in a table cell or at a line start.

    Everything :func:`terminal_text` does, then ``& < >`` become HTML character
    references and Markdown punctuation (``\\ ` * _ { } [ ] ( ) # + ! | ~ $ :``)
    is backslash-escaped, so no link, image, emphasis, code span, raw HTML or
    extra table cell can form from the input. A leading ``-``, ``=`` or list
    number is escaped too, and leading or trailing spaces become ``&#32;`` (a
    renderer trims plain ones), so the text cannot open a list, a heading or an
    indented code block either.
    """
    text = terminal_text(s).translate(_MARKDOWN_TABLE)
    match = _BLOCK_START.match(text)
    if match:  # CommonMark "Backslash escapes": "\\-" and "1\\." stay literal text
        text = match.group(1)[:-1] + "\\" + text[match.end(1) - 1:]
    core = text.strip(" ")
    if core != text:  # a character reference is text to the block parser, not indentation
        lead = len(text) - len(text.lstrip(" "))
        trail = len(text) - len(core) - lead
        text = "&#32;" * lead + core + "&#32;" * trail
    return text


def plot_text(s: str) -> str:
    """``s`` as a matplotlib label: :func:`terminal_text`, ``$`` escaped (no mathtext).

    A leading underscore gets a space before it, since matplotlib leaves labels
    starting with ``_`` out of the legend.
    """
    text = terminal_text(s).replace("$", "\\$")
    return " " + text if text.startswith("_") else text


def json_safe(value: Any) -> Any:
    """``value`` (builtin JSON types) with every non-finite float replaced by ``None``.

    JSON has no NaN or Infinity; the reports dump with ``allow_nan=False`` after this.
    """
    if isinstance(value, float):
        return value if math.isfinite(value) else None
    if isinstance(value, Mapping):
        return {str(k): json_safe(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [json_safe(v) for v in value]
    return value


#: Characters that keep a string out of a code span even though a code span shows its
#: content literally: a backtick ends the span, a pipe splits a GFM table cell even inside
#: one (GFM spec, "Tables" extension), and ``\\ < > & [ ] $`` are kept out so the raw
#: Markdown never carries markup a less careful renderer could act on.
_NOT_IN_CODE_SPAN = frozenset("`|\\<>&[]$")


def md_name(text: str) -> str:
    """A codec name or source spec for Markdown: a code span when plainly safe, else escaped.

    A code span is used only for non-empty text of printable characters without
    surrounding spaces and none of :data:`_NOT_IN_CODE_SPAN`; anything else is
    shown as :func:`markdown_text`, which cannot form markup whatever it holds.
    """
    text = str(text)
    if text and text == text.strip() and terminal_text(text) == text \
            and not _NOT_IN_CODE_SPAN.intersection(text):
        return f"`{text}`"
    return markdown_text(text)
