"""Text that comes from data (level, grouping and outcome names, notes, paths, messages that
quote them) made safe to show.

Two rules hold everywhere in the app. Such text is never read as markup: widgets get
``rich.text.Text`` or ``textual.content.Content`` objects built from plain strings, never a
string that Textual would parse (``[/]`` would raise, ``[@click=app.quit]`` would run an
action when clicked). And it never reaches the terminal as control codes: an escape
character in a level name could otherwise recolour the screen, set the window title or
draw a hyperlink. Control characters are shown as the symbols of Unicode's Control
Pictures block (ESC as ␛), one character for one, so styles laid over a Text keep their
places.
"""

from __future__ import annotations

from rich.text import Text
from textual.content import Content

#: C0 controls as their pictures (U+2400 + code), DEL as ␡, C1 controls (which some
#: terminals read as escape sequences) as the replacement character.
_ONE_LINE: dict[int, int] = (
    {code: 0x2400 + code for code in range(0x20)}
    | {0x7F: 0x2421}
    | {code: 0xFFFD for code in range(0x80, 0xA0)}
)
#: The same, keeping line breaks and tabs (for notes, which may span lines).
_LINES: dict[int, int] = {
    code: picture for code, picture in _ONE_LINE.items() if chr(code) not in "\n\t"
}


def visible(text: str, *, lines: bool = False) -> str:
    """``text`` with every control character shown as a symbol; ``lines`` keeps line
    breaks and tabs."""
    return text.translate(_LINES if lines else _ONE_LINE)


def literal(text: str, style: str = "", *, lines: bool = False) -> Content:
    """Content that shows ``text`` exactly as it is (no markup), for a Label or Static."""
    content = Content(visible(text, lines=lines))
    return content.stylize(style) if style else content


def literal_text(text: str, style: str = "", *, lines: bool = False) -> Text:
    """A rich Text that shows ``text`` exactly as it is (no markup)."""
    return Text(visible(text, lines=lines), style=style)


def make_visible(text: Text) -> Text:
    """Show every control character in ``text`` (a Text built from several pieces) as a
    symbol, in place, keeping its styles; line breaks and tabs stay."""
    plain = text.plain
    shown = visible(plain, lines=True)
    if shown != plain:
        text.plain = shown  # one character for one: the spans keep their places
    return text
