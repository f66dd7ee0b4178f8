"""present/escape.py: user text is shown exactly as typed in rich, matplotlib and HTML.

The outside references are the consumers themselves: rich's own markup parser, matplotlib's
math-text detection and Agg renderer, and Python's ``html.parser``.
"""

from __future__ import annotations

from html.parser import HTMLParser

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from reconcile.present.escape import html_text, markup, one_line, plot_text

# Text a hostile user might type: markup-like brackets, dollars, backslashes, tags.
_NASTY = [
    "[/]",
    "[rev/B]",
    "[bold]x[/bold]",
    "[link=file:///etc/passwd]x[/link]",
    "a\\",
    "a\\[b]",
    "\\[/]",
    "$",
    "$x^$",
    r"$\frac{$",
    r"a\$b",
    "V$out$",
    "<script>alert(1)</script>",
    '"quoted" & \'single\'',
    "",
]
_text = st.text(alphabet=st.sampled_from(list("[]/\\$<>&\"'ab =#{}^_")), max_size=30)


def _rich_plain(marked: str) -> str:
    from rich.text import Text

    return Text.from_markup(marked, emoji=False).plain


@pytest.mark.parametrize("s", _NASTY)
def test_markup_round_trips_through_rich(s):
    # Reference: rich's own markup parser gives back the text exactly as typed.
    assert _rich_plain(markup(s)) == s


@settings(max_examples=200, derandomize=True, deadline=None)
@given(_text)
def test_markup_round_trips_any_text(s):
    # Reference: rich's markup parser (no MarkupError, no lost characters).
    assert _rich_plain(markup(s)) == s


def test_markup_in_a_table_prints_as_typed():
    # Reference: rich's Console renders the table; the cell reads as typed.
    from rich.console import Console
    from rich.table import Table

    console = Console(record=True, width=80, color_system=None)
    t = Table()
    t.add_column(markup("[/]"))
    t.add_row(markup("[rev/B]"))
    console.print(t)
    out = console.export_text()
    assert "[/]" in out and "[rev/B]" in out


def test_none_is_empty():
    assert markup(None) == plot_text(None) == html_text(None) == ""


@settings(max_examples=100, derandomize=True, deadline=None)
@given(_text)
def test_plot_text_is_never_math_text(s):
    # Reference: matplotlib.cbook.is_math_text, the test matplotlib's Text applies.
    from matplotlib import cbook

    assert not cbook.is_math_text(plot_text(s))


@pytest.mark.parametrize("s", _NASTY)
def test_plot_text_draws(s):
    # Reference: matplotlib's Agg renderer; unescaped, "$x^$" raises a ParseFatalException.
    from matplotlib.figure import Figure

    fig = Figure()
    ax = fig.add_subplot()
    ax.set_title(plot_text(s))
    ax.set_xlabel(plot_text(s))
    ax.plot([0, 1], [0, 1], label=plot_text(s) or "x")
    ax.legend()
    fig.canvas.draw()
    # matplotlib's Text shows non-math text with "\$" unescaped: exactly as typed.
    assert ax.title._preprocess_math(ax.title.get_text()) == (s, False)


class _Collect(HTMLParser):
    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.tags: list[str] = []
        self.data: list[str] = []
        self.attrs: list[tuple[str, str | None]] = []

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)
        self.attrs.extend(attrs)

    def handle_data(self, data):
        self.data.append(data)


@settings(max_examples=200, derandomize=True, deadline=None)
@given(_text)
def test_html_text_round_trips(s):
    # Reference: Python's html.parser: no tag other than ours, the text and attribute as typed.
    p = _Collect()
    p.feed(f'<p title="{html_text(s)}">{html_text(s)}</p>')
    p.close()
    assert p.tags == ["p"]
    assert "".join(p.data) == s
    assert p.attrs == [("title", s)]


# ------------------------------------------------------------------------- one_line
@settings(max_examples=200, deadline=None)
@given(st.text())
def test_one_line_never_breaks_a_line_and_can_be_read_back(s):
    # str.splitlines() (Python docs, "str.splitlines": its list of line boundaries) is
    # the outside judge of what breaks a line; unicode_escape decoding the inverse
    line = one_line(s)
    assert len(line.splitlines()) <= 1
    assert not any(ord(c) < 0x20 or 0x7F <= ord(c) <= 0x9F for c in line)
    if "\\" not in s:  # a backslash typed by the user is left as typed
        assert line.encode("ascii", "backslashreplace").decode("unicode_escape") == s


def test_one_line_shows_each_breaking_character_by_its_escape():
    assert one_line("a\rb\x00c\u2028d\x1b[31me\tf") == r"a\rb\x00c\u2028d\x1b[31me\tf"
    assert one_line("R1 [rev/B] 4k7 é") == "R1 [rev/B] 4k7 é"
    assert one_line(None) == ""
