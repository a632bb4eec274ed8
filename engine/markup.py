"""Names are data, never markup: escaping of user text for Markdown and HTML.

Column names, file names, sheet names and the messages that quote them come
from the user's file. Wherever they are shown in Markdown (the dashboard's
text elements, ``summary.md``) or HTML (``summary.html``) they must read as
the characters they are and nothing else:

* ``&``, ``<`` and ``>`` become HTML entities (no raw HTML, no entity of the
  user's); Markdown marks (emphasis, code, links, images, tables,
  strike-through) are backslash-escaped (CommonMark lets any ASCII
  punctuation be escaped that way);
* ``$`` is escaped so that ``$...$`` is not typeset as maths;
* bare links are broken. GitHub-flavoured Markdown turns ``http://...``,
  ``www.`` and ``name@host`` into links on the text *after* escapes are
  removed, so a backslash cannot stop it: a WORD JOINER (U+2060, invisible,
  zero width) is put after every ``:`` (also stops ``:emoji:`` and
  ``:colour[...]`` short codes), between ``www`` and its dot, and before
  ``@``;
* line breaks and other control characters become spaces (a name cannot start
  a new block), and bidirectional-override characters are shown as U+FFFD so
  they cannot reorder the text around them.
"""
from __future__ import annotations

import html
import re
from typing import Any

__all__ = ["WORD_JOINER", "escape_name", "escape_text", "plain_text"]

#: Invisible, zero-width, no line break: placed to break link detection.
WORD_JOINER = "\u2060"

_MD_MARKS = re.compile(r"([\\`*_\[\]|~$])")
_LINE_START = re.compile(r"^(\s*)([#+\-=>]|\d+[.)])")
_CONTROLS = re.compile(r"[\x00-\x1f\x7f-\x9f\u2028\u2029]")
_BIDI = re.compile(r"[\u202a-\u202e\u2066-\u2069\u200e\u200f\u061c]")
_WWW = re.compile(r"(?i)\b(www)(?=\.)")


def plain_text(text: Any) -> str:
    """``str(text)`` on one line: control characters become spaces, bidi overrides U+FFFD."""
    s = _CONTROLS.sub(" ", str(text))
    s = _BIDI.sub("\ufffd", s)
    return s.replace(WORD_JOINER, "")


def _unlink(s: str) -> str:
    s = s.replace(":", ":" + WORD_JOINER)
    s = s.replace("@", WORD_JOINER + "@")
    return _WWW.sub(r"\1" + WORD_JOINER, s)


def escape_text(text: Any) -> str:
    """Text (a sentence that may quote names) made literal for Markdown.

    Marks that change meaning anywhere in a line are escaped, maths and bare
    links are disabled (see the module notes); marks that count only at the
    start of a line are left alone, so the text must follow other text on its
    line (use `escape_name` for a value that may stand alone).

    Parameters
    ----------
    text : anything; ``str(text)`` is escaped.

    Returns
    -------
    str
        Markdown source that renders as the characters of ``text``.
    """
    return _unlink(_MD_MARKS.sub(r"\\\1", html.escape(plain_text(text), quote=False)))


def escape_name(name: Any, fmt: str = "markdown") -> str:
    """A user-supplied name (column, file, sheet) made literal for Markdown or HTML.

    Parameters
    ----------
    name : the name; ``str(name)`` is used.
    fmt : ``'markdown'`` (dashboard text, ``summary.md``) or ``'html'``
        (``summary.html``; entities for ``& < > " '``).

    Returns
    -------
    str
        Text that renders as the name's characters: no emphasis, link, image,
        maths, HTML, list or heading, wherever on a line it is placed.

    Examples
    --------
    >>> escape_name("[x](http://a.b) $y$", "html")
    '[x](http://a.b) $y$'
    >>> escape_name("a_b")
    'a\\\\_b'
    """
    if fmt == "html":
        return html.escape(plain_text(name), quote=True)
    if fmt != "markdown":
        raise ValueError(f"fmt must be 'markdown' or 'html', not {fmt!r}")
    s = escape_text(name)
    return _LINE_START.sub(lambda m: m.group(1) + "\\" + m.group(2)
                           if not m.group(2)[0].isdigit()
                           else m.group(1) + m.group(2)[:-1] + "\\" + m.group(2)[-1], s, count=1)
