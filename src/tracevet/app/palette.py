"""Colours of the review app: severities and traces, for colour terminals and for NO_COLOR.

One palette serves 24-bit, 256-colour and 16-colour terminals: the app draws
in RGB and the terminal layer (Rich) maps each colour to the nearest one the
terminal has. The RGB values are chosen so that this mapping keeps the
meaning on a 16-colour terminal (``TERM=xterm``): FAIL lands on bright red,
the most urgent colour there, warn on bright yellow, ok on bright green, and
the three traces on white, bright cyan and bright magenta, so no severity
shares a colour with a trace (checked in the tests with Rich's own mapping).
Every severity also has a word and a symbol, so nothing rests on colour
alone (Okabe & Ito 2008, "Color Universal Design", for the principle).

Without colour (``NO_COLOR``), Textual turns every colour into a grey of the
same lightness, which would make a red FAIL *dimmer* than plain text; the
monochrome palette therefore marks FAIL with bold reverse (swapped foreground and background) and warn
with bold, and draws the cleaned trace of the averaged beat dotted.
"""

from __future__ import annotations

from dataclasses import dataclass

from rich.style import Style

RGB = tuple[int, int, int]


@dataclass(frozen=True)
class Palette:
    """Styles of one display mode.

    Attributes
    ----------
    name : str
        ``colour`` or ``monochrome``.
    severity : dict
        Rich style per severity key (``fail``, ``warn``, ``ok``, ``none``).
    trace : dict
        RGB colour per trace (``original``, ``cleaned``, ``removed``) for the plots.
    marks : RGB
        Colour of the fiducial marks (J point, ST reading point) on the averaged beat.
    """

    name: str
    severity: dict[str, Style]
    trace: dict[str, RGB]
    marks: RGB

    def trace_style(self, name: str) -> Style:
        """Rich style drawing a legend sample of trace ``name``."""
        if self.name == "monochrome":
            return Style(bold=name == "original")
        red, green, blue = self.trace[name]
        return Style(color=f"rgb({red},{green},{blue})")


COLOUR = Palette(
    name="colour",
    severity={
        "fail": Style(color="rgb(230,40,40)", bold=True),  # 16 colours: bright red
        "warn": Style(color="rgb(240,228,66)"),  # bright yellow
        "ok": Style(color="rgb(60,180,75)"),  # bright green
        "none": Style(dim=True),
    },
    trace={
        "original": (200, 200, 200),  # 16 colours: white
        "cleaned": (86, 180, 233),  # bright cyan
        "removed": (204, 121, 220),  # bright magenta
    },
    marks=(240, 240, 240),
)

MONOCHROME = Palette(
    name="monochrome",
    severity={
        "fail": Style(bold=True, reverse=True),
        "warn": Style(bold=True),
        "ok": Style(),
        "none": Style(dim=True),
    },
    trace=dict(COLOUR.trace),
    marks=COLOUR.marks,
)


def palette_for(colour: bool) -> Palette:
    """The palette of a display with (``colour``) or without colour."""
    return COLOUR if colour else MONOCHROME
