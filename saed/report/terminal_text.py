"""Long lines of the terminal summaries: wrapped with a hanging indent, and joined back for scripts.

A look-alike note or the order check of two crystals runs to several hundred characters; a terminal's
own wrap puts the continuation at the left margin, where it reads as a new line of the table.
"""

from __future__ import annotations

import textwrap

__all__ = ["NOTE_WIDTH", "NOTE_INDENT", "wrapped", "unwrapped"]

#: Width of the wrapped notes, and the hanging indent of their continuation lines.
NOTE_WIDTH = 100
NOTE_INDENT = "        "


def wrapped(prefix: str, text: str, indent: str = NOTE_INDENT) -> str:
    """`prefix` + `text` wrapped at NOTE_WIDTH columns, continuation lines indented by `indent`.

    >>> lines = wrapped("note: ", "word " * 30).splitlines()
    >>> len(lines), max(len(x) for x in lines) <= NOTE_WIDTH, lines[1].startswith(NOTE_INDENT + "word")
    (2, True, True)
    """
    return textwrap.fill(text, NOTE_WIDTH, initial_indent=prefix, subsequent_indent=indent,
                         break_on_hyphens=False, break_long_words=False)


def unwrapped(text: str) -> list[str]:
    """The lines of `text` with each wrapped note joined back into one line (for scripts that grep it).

    >>> unwrapped("best: x\\n  note: a b\\n        c d\\n  hkl")
    ['best: x', '  note: a b c d', '  hkl']
    """
    out: list[str] = []
    for line in text.splitlines():
        if out and line.startswith(NOTE_INDENT) and line.strip():
            out[-1] += " " + line.strip()
        else:
            out.append(line)
    return out
