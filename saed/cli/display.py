"""``--units`` and the terminal's index style, shared by every command that prints lengths or indices."""

from __future__ import annotations

import sys

from saed.crystal.notation import UNITS, Units, terminal_style, units_named

__all__ = ["add_units_argument", "units_from_args", "display_options", "say"]


def add_units_argument(p) -> None:
    p.add_argument("--units", choices=("nm", "angstrom"), default="nm",
                   help="length unit of every spacing, radius and scale a person reads (default nm; "
                        "JSON always keeps nm)")


def units_from_args(args) -> Units:
    return units_named(getattr(args, "units", None) or "nm") if getattr(args, "units", None) else UNITS["nm"]


def display_options(args, stream=None) -> dict:
    """``style`` (overbars when `stream`, default stdout, encodes UTF-8) and ``units`` for the printers."""
    return {"style": terminal_style(stream if stream is not None else sys.stdout), "units": units_from_args(args)}


def say(text: str, file=None) -> None:
    """Print one line a person reads: index groups get overbars on a UTF-8 stream (the marks take no
    column, so padding done before stays aligned); otherwise the text is printed as it is."""
    from saed.crystal.notation import person_text

    stream = file if file is not None else sys.stdout
    print(person_text(text, terminal_style(stream)), file=stream)
