"""Names are data: engine.markup escapes user text for Markdown and HTML.

What counts as a mark follows the CommonMark spec (section 2.4: any ASCII
punctuation may be backslash-escaped) and the GitHub Flavored Markdown spec
(section 6.9, extended autolinks: ``www.``, ``http://``, ``https://`` and
e-mail addresses). That the page shows no link, no maths and no formatting
for such names is checked in a real browser in tests/test_browser.py.
"""
from __future__ import annotations

import html
import re

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from engine.markup import WORD_JOINER, escape_name, escape_text, plain_text
from engine.pack import md_escape

NASTY = [
    "[click](http://evil.example) $x^2$",
    "http://bare.example/path?q=1",
    "www.bare.example",
    "ops@plant.example",
    "<script>alert(1)</script>",
    "&amp; &lt;b&gt;",
    "**bold** _em_ `code` ~~gone~~",
    ":red[alarm] :smile: :material/home:",
    "# heading",
    "1. first",
    "- item",
    "| a | b |",
    "line one\nline two\r\n# three",
    "right\u202eto left",
]


def _unescape(md: str) -> str:
    """Undo the escapes: CommonMark backslash escapes, then the invisible joiners."""
    return html.unescape(re.sub(r"\\([!-/:-@\[-`{-~])", r"\1", md.replace(WORD_JOINER, "")))


@pytest.mark.parametrize("name", NASTY)
def test_escaped_name_reads_back_as_the_same_characters(name):
    assert _unescape(escape_name(name)) == plain_text(name)
    assert _unescape(escape_text(name)) == plain_text(name)


@pytest.mark.parametrize("name", NASTY)
def test_no_mark_survives(name):
    out = escape_name(name)
    # every mark that changes meaning mid-line is preceded by a backslash
    for ch in "[]`*_$|~":
        assert re.search(r"(?<!\\)" + re.escape(ch), out.replace("\\\\", "")) is None, (ch, out)
    assert "<" not in out and ">" not in out  # raw HTML impossible
    assert re.search(r"&(?!(amp|lt|gt);)", out) is None  # no entity of the user's
    # GFM extended autolinks need these literal sequences; none is left
    plain = out.replace("\\", "")
    for pattern in (r"https?://", r"(?i)www\.", r"[\w.+-]@[\w-]"):
        assert re.search(pattern, plain) is None, (pattern, out)
    assert "\n" not in out and "\r" not in out
    assert not re.match(r"\s*([#+\-=>]|\d+[.)])", out)  # cannot open a block
    assert "\u202e" not in out


def test_html_form_uses_entities_only():
    assert escape_name('<img src=x onerror="a()">&', "html") == \
        "&lt;img src=x onerror=&quot;a()&quot;&gt;&amp;"
    assert escape_name("[x](http://a.example) $y$", "html") == "[x](http://a.example) $y$"
    with pytest.raises(ValueError):
        escape_name("x", "latex")


def test_ordinary_names_stay_readable():
    assert escape_name("bath_temp_C") == r"bath\_temp\_C"
    assert escape_name("pressure kPa (gauge)") == "pressure kPa (gauge)"
    assert escape_name("Temperatur °C") == "Temperatur °C"
    # the pack's sentence escaper is the same function
    assert md_escape("see http://x.example") == escape_text("see http://x.example")


@settings(max_examples=200, deadline=None)
@given(st.text(max_size=60))
def test_any_text_round_trips(text):
    out = escape_name(text)
    assert _unescape(out) == plain_text(text)
    assert "\n" not in out
