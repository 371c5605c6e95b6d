"""How saed writes indices and lengths for a person: the one place for display text.

Every output a person reads (terminal, HTML, PNG, notes) goes through here, so the forms agree:

* hexagonal and trigonal phases always show the 4-index Miller-Bravais form, [UVTW] and (hkil)
  (:func:`shown_zone`, :func:`shown_plane`); JSON keeps both the 3- and the 4-index fields;
* negative indices carry an overbar where the medium can draw one: ``"unicode"`` (combining
  overline U+0305, for a UTF-8 terminal), ``"html"`` and ``"mathtext"`` (matplotlib); ``"plain"``
  is the minus-sign fallback (``1-10``);
* lengths in nm (default) or Å (:class:`Units`), with the same significant figures in both;
  the electron wavelength always in pm (:func:`wavelength_text`); angles as ``12.5 deg`` in terminal
  text (one ASCII form, as in the JSON notes) and ``12.5°`` in pictures and HTML.

Indices are written compactly (``2-1-10``) while every index has one digit, else separated by
spaces (``17 -13 -4 18``), so a reader never has to guess where one index ends.
"""

from __future__ import annotations

import html as _html
import math
import re
import unicodedata
from dataclasses import dataclass
from fractions import Fraction

import numpy as np

from saed.crystal.miller import direction_to_4, plane_to_4
from saed.errors import InputError

__all__ = ["STYLES", "indices_text", "zone_text", "plane_text", "shown_zone", "shown_plane", "projected_plane",
           "fraction_text", "terminal_style", "text_width", "pad", "table_lines", "person_text", "Units", "UNITS",
           "units_named", "wavelength_text", "degrees_text", "signed_text", "label_text", "Reciprocal",
           "RECIPROCAL_UNIT", "UnitText"]

#: Media an index can be written for.
STYLES = ("plain", "unicode", "html", "mathtext")

_OVERLINE = "\u0305"
_UNICODE_FRACTIONS = {(1, 2): "½", (1, 3): "⅓", (2, 3): "⅔", (1, 4): "¼", (3, 4): "¾", (1, 6): "⅙", (1, 8): "⅛"}


def _check_style(style: str) -> None:
    if style not in STYLES:
        raise InputError(f"index text style {style!r}: use one of {', '.join(STYLES)}")


def indices_text(idx, style: str = "plain") -> str:
    """Indices without brackets, negatives marked for the medium.

    >>> indices_text([2, -1, -1, 0])
    '2-1-10'
    >>> indices_text([17, -13, -4, 18])
    '17 -13 -4 18'
    >>> indices_text([1, -1, 0], "unicode") == '11\\u03050'
    True
    >>> indices_text([1, -1, 0], "html")
    '1<span class="ob">1</span>0'
    >>> indices_text([1, -1, 0], "mathtext")
    '$1\\\\,\\\\bar{1}\\\\,0$'
    """
    _check_style(style)
    vals = [int(v) for v in np.asarray(idx).ravel()]
    wide = any(abs(v) >= 10 for v in vals)
    if style == "plain":
        return (" " if wide else "").join(str(v) for v in vals)
    if style == "unicode":
        parts = ["".join(c + _OVERLINE for c in str(-v)) if v < 0 else str(v) for v in vals]
        return (" " if wide else "").join(parts)
    if style == "html":
        parts = [f'<span class="ob">{-v}</span>' if v < 0 else str(v) for v in vals]
        return (" " if wide else "").join(parts)
    parts = [(r"\bar{%d}" % -v) if v < 0 else str(v) for v in vals]
    return "$" + (r"\ " if wide else r"\,").join(parts) + "$"


_BRACKETS = {"zone": ("[", "]"), "zone family": ("⟨", "⟩"), "plane": ("(", ")"), "plane family": ("{", "}"),
             "none": ("", "")}
_ASCII_BRACKETS = {"⟨": "<", "⟩": ">"}


def _wrap(body: str, kind: str, style: str) -> str:
    left, right = _BRACKETS[kind]
    if style == "plain":
        left, right = _ASCII_BRACKETS.get(left, left), _ASCII_BRACKETS.get(right, right)
    if style == "html":
        left, right = _html.escape(left), _html.escape(right)
    if style == "mathtext":
        left = {"⟨": r"\langle ", "{": r"\{"}.get(left, left)
        right = {"⟩": r"\rangle", "}": r"\}"}.get(right, right)
        return "$" + left + body.strip("$") + right + "$"
    return left + body + right


def shown_zone(uvw, hexagonal: bool) -> np.ndarray:
    """The indices a person sees for the zone axis [uvw]: [UVTW] for hexagonal axes, else [uvw].

    >>> shown_zone([1, 0, 0], True).tolist(), shown_zone([1, 1, 2], False).tolist()
    ([2, -1, -1, 0], [1, 1, 2])
    """
    u = np.asarray(uvw)
    if hexagonal and u.shape[-1] == 3:
        return direction_to_4(u)
    return np.rint(u).astype(np.int64)


def shown_plane(hkl, hexagonal: bool) -> np.ndarray:
    """The indices a person sees for the plane / reflection (hkl): (hkil) for hexagonal axes.

    >>> shown_plane([1, 0, 1], True).tolist()
    [1, 0, -1, 1]
    """
    h = np.asarray(hkl)
    if hexagonal and h.shape[-1] == 3:
        return plane_to_4(h)
    return np.rint(h).astype(np.int64)


def zone_text(uvw, hexagonal: bool = False, style: str = "plain", *, family: bool = False) -> str:
    """``[2-1-10]`` for Co-hcp [100]; ``<112>`` (``⟨112⟩`` outside plain text) for a family.

    Already 4-index input (length 4) is written as it is.

    >>> zone_text([1, 0, 0], True)
    '[2-1-10]'
    >>> zone_text([1, 1, 2], False, family=True)
    '<112>'
    """
    return _wrap(indices_text(shown_zone(uvw, hexagonal), style), "zone family" if family else "zone", style)


def plane_text(hkl, hexagonal: bool = False, style: str = "plain", *, brackets: str = "none") -> str:
    """A reflection or plane: bare ``01-11`` (spot labels), ``(01-11)`` or the family ``{01-11}``.

    >>> plane_text([0, 1, 1], True), plane_text([1, 1, 1], False, brackets="plane family")
    ('01-11', '{111}')
    """
    if brackets not in ("none", "plane", "plane family"):
        raise InputError(f"plane brackets {brackets!r}: use none, plane or plane family")
    return _wrap(indices_text(shown_plane(hkl, hexagonal), style), brackets, style)


def projected_plane(metric_nm2: np.ndarray, hkl, uvw) -> tuple[int, np.ndarray]:
    """Where a higher-order Laue-zone reflection lands when projected along the zone axis.

    g_proj = g - (g . t / t . t) t with t the beam direction [uvw]; in reciprocal-lattice indices
    that is hkl - N (G uvw) / (uvw . G uvw), N = hkl . uvw the Laue-zone number and G the real-space
    metric tensor. Returned as (n, integers) with g_proj = integers / n, n as small as possible.

    fcc [111]: the first-layer reflection -200 projects onto 1/3 (-4 2 2), the 1/3{422} position:

    >>> n, ints = projected_plane(np.eye(3) * 0.35447**2, [-2, 0, 0], [1, 1, 1])
    >>> n, ints.tolist()
    (3, [-4, 2, 2])
    """
    g = np.asarray(metric_nm2, dtype=float)
    h = np.asarray(hkl, dtype=float)
    t = np.asarray(uvw, dtype=float)
    gt = g @ t
    tt = float(t @ gt)
    if tt <= 0:
        raise InputError(f"zone axis {np.asarray(uvw).tolist()} is zero")
    proj = h - float(h @ t) / tt * gt
    fr = [Fraction(float(v)).limit_denominator(24) for v in proj]
    den = math.lcm(*(f.denominator for f in fr))
    return den, np.array([int(f * den) for f in fr], dtype=np.int64)


def fraction_text(den: int, style: str = "plain") -> str:
    """The prefix of a fractional reflection: '' for 1, '⅓' (unicode / html), '1/3' (plain), mathtext frac.

    >>> fraction_text(3), fraction_text(3, "unicode"), fraction_text(1, "unicode")
    ('1/3', '⅓', '')
    """
    _check_style(style)
    if den == 1:
        return ""
    if style in ("unicode", "html"):
        return _UNICODE_FRACTIONS.get((1, den), f"1/{den}")
    if style == "mathtext":
        return r"$\frac{1}{%d}$" % den
    return f"1/{den}"


# ---------------------------------------------------------------------------------------------- terminal
def terminal_style(stream=None) -> str:
    """'unicode' when `stream` (default sys.stdout) encodes UTF-8, else 'plain'."""
    import sys

    enc = getattr(stream if stream is not None else sys.stdout, "encoding", None) or ""
    return "unicode" if enc.replace("-", "").replace("_", "").lower() in ("utf8", "utf8sig") else "plain"


def text_width(text: str) -> int:
    """Columns `text` takes in a terminal: combining marks (the overbars) take none.

    >>> text_width(indices_text([1, -1, 0], "unicode"))
    3
    """
    return sum(0 if unicodedata.combining(c) else 1 for c in text)


def pad(text: str, width: int, align: str = "<") -> str:
    """`text` padded to `width` terminal columns ('<' left, '>' right), never cut."""
    fill = " " * max(0, width - text_width(text))
    return text + fill if align == "<" else fill + text


def table_lines(header, rows, indent: str = "") -> list[str]:
    """A terminal table: `header` is [(title, '<' or '>')], `rows` lists of cell texts. Each column is as
    wide as its widest cell in terminal columns, so long zones ([17 -13 -4 18]) and overbars keep it aligned.

    >>> print("\\n".join(table_lines([("hkl", "<"), ("d nm", ">")], [["111", "0.2047"], ["2-20", "0.1253"]])))
    hkl     d nm
    111   0.2047
    2-20  0.1253
    """
    widths = [max([text_width(h)] + [text_width(r[i]) for r in rows]) for i, (h, _) in enumerate(header)]
    return [indent + "  ".join(pad(c, w, a) for c, w, (_, a) in zip(cells, widths, header)).rstrip()
            for cells in [[h for h, _ in header]] + [list(r) for r in rows]]


_BRACKETED = re.compile(r"([\[(])((?:-?\d){3,4})([\])])")
#: a bare index group with a minus inside ("the 20-2 row", "1-100 spots"); a signed number (-100) is not one
_TOKEN = re.compile(r"(?<![\w.\-/+])-?\d[\d\-]*(?![\w.])")
_INDEX_GROUP = re.compile(r"(?:-?\d){3,4}")
_DEG = re.compile(r"(\d) deg\b")


def _group_text(group: str, style: str) -> str:
    """A run of single-digit indices written as stored ('1-11', '-400') in the medium's form, no delimiters."""
    return indices_text([int(v) for v in re.findall(r"-?\d", group)], style).strip("$")


def _bare(token: str, style: str) -> str:
    """A bare index group with a minus inside ('20-2', '1-100'); anything else (-100, dates) unchanged."""
    if not _INDEX_GROUP.fullmatch(token) or "-" not in token[1:]:
        return token
    return _group_text(token, style)


def person_text(text: str, style: str = "plain") -> str:
    """A stored note (plain text, as in JSON) made ready for a medium: index groups get overbars
    (``[1-102]``, ``the 20-2 row``); in HTML and pictures ``12.5 deg`` becomes ``12.5°``; HTML is escaped.
    Plain style returns it as it is.

    >>> person_text("tilt 15.8 deg to [1-102]", "unicode") == "tilt 15.8 deg to [11\\u030502]"
    True
    >>> person_text("the 20-2 row, -100 px, 2026-12-02", "mathtext")
    'the 2\\\\,0\\\\,\\\\bar{2} row, -100 px, 2026-12-02'

    """
    _check_style(style)
    if style == "plain":
        return text
    if style == "html":
        text = _html.escape(text, quote=True)

    def one(m):
        return m.group(1) + _group_text(m.group(2), style) + m.group(3)

    text = _BRACKETED.sub(one, text)
    text = _TOKEN.sub(lambda m: _bare(m.group(0), style), text)
    if style == "unicode":
        return text
    return _DEG.sub(lambda m: m.group(1) + ("&deg;" if style == "html" else "°"), text)


def label_text(label: str, style: str = "plain") -> str:
    """A stored reflection label known to hold indices ('-400', '1-11', '533/622', '10-10') in the
    medium's form. Unlike :func:`person_text`, a group with a leading minus is indices here, not a
    signed number. Groups that are not 3 or 4 single-digit indices are left as they are.

    >>> label_text("-400/1-11", "unicode") == "4\u030500/11\u03051"
    True
    >>> label_text("533/622")
    '533/622'
    """
    _check_style(style)
    parts = []
    for g in label.split("/"):
        if _INDEX_GROUP.fullmatch(g):
            g = _group_text(g, style)
        parts.append(g)
    return "/".join(parts)


def signed_text(value, decimals: int = 2) -> str:
    """A signed number without a negative zero: '+0.00', not '-0.00', for -0.001; '-' for none.

    >>> signed_text(-0.001), signed_text(-0.26), signed_text(None)
    ('+0.00', '-0.26', '-')
    """
    if value is None or not math.isfinite(float(value)):
        return "-"
    return f"{round(float(value), decimals) + 0.0:+.{decimals}f}"


def degrees_text(value_deg: float, spec: str = ".1f", style: str = "unicode") -> str:
    """An angle: '12.5 deg' in terminal text (plain, unicode), '12.5°' in pictures and HTML.

    >>> degrees_text(12.48), degrees_text(12.48, style="mathtext")
    ('12.5 deg', '12.5°')
    """
    num = format(value_deg, spec)
    if style in ("plain", "unicode"):
        return num + " deg"
    return num + ("&deg;" if style == "html" else "°")


# ---------------------------------------------------------------------------------------------- units
@dataclass(frozen=True)
class Units:
    """Length units for display: every real-space length and every reciprocal length follows them.

    ``per_nm``: how many display units make one nm (1 for nm, 10 for Å).
    """

    name: str
    symbol: str
    ascii_symbol: str
    per_nm: float

    def length(self, x_nm: float) -> float:
        return float(x_nm) * self.per_nm

    def reciprocal(self, x_inv_nm: float) -> float:
        return float(x_inv_nm) / self.per_nm

    def label(self, style: str = "unicode") -> str:
        return self.ascii_symbol if style == "plain" else self.symbol

    def inverse_label(self, style: str = "unicode") -> str:
        return "1/" + self.label(style)

    def _shift(self) -> int:
        return int(round(math.log10(self.per_nm)))

    def length_text(self, x_nm, decimals_nm: int = 4) -> str:
        """A length with the significant figures it has in nm: 0.2171 nm, 2.171 Å.

        >>> UNITS["angstrom"].length_text(0.21714), UNITS["nm"].length_text(0.21714)
        ('2.171', '0.2171')
        """
        if x_nm is None or not math.isfinite(float(x_nm)):
            return "-"
        return f"{self.length(x_nm):.{max(0, decimals_nm - self._shift())}f}"

    def reciprocal_text(self, x_inv_nm, decimals_inv_nm: int = 3) -> str:
        """A reciprocal length with the same significant figures: 4.606 1/nm, 0.4606 1/Å."""
        if x_inv_nm is None or not math.isfinite(float(x_inv_nm)):
            return "-"
        return f"{self.reciprocal(x_inv_nm):.{decimals_inv_nm + self._shift()}f}"


#: The display units `--units` offers.
UNITS = {"nm": Units("nm", "nm", "nm", 1.0), "angstrom": Units("angstrom", "Å", "A", 10.0)}


def units_named(name: str) -> Units:
    """'nm' or 'angstrom' (also 'A', 'Å')."""
    key = {"a": "angstrom", "å": "angstrom", "angstroms": "angstrom"}.get(str(name).strip().lower(),
                                                                          str(name).strip().lower())
    if key not in UNITS:
        raise InputError(f"units {name!r}: use nm or angstrom")
    return UNITS[key]


def wavelength_text(wavelength_nm: float) -> str:
    """The electron wavelength, always in pm (one style in every output).

    >>> wavelength_text(0.0025079)
    '2.5079 pm'
    """
    return f"{wavelength_nm * 1e3:.4f} pm"


@dataclass(frozen=True)
class Reciprocal:
    """A reciprocal length inside stored prose, written in the display units when the prose is shown.

    ``value_inv_nm`` None stands for the unit label itself (``1/nm``, ``1/Å``). Written with
    ``decimals_inv_nm`` fixed decimals in 1/nm (one more per factor of ten in the other unit:
    :meth:`Units.reciprocal_text`), or with ``significant`` figures when that is set.
    """

    value_inv_nm: float | None = None
    decimals_inv_nm: int = 2
    significant: int | None = None

    def text(self, units: Units, style: str = "plain") -> str:
        if self.value_inv_nm is None:
            return units.inverse_label(style)
        if self.significant is not None:
            return f"{units.reciprocal(self.value_inv_nm):.{self.significant}g}"
        return units.reciprocal_text(self.value_inv_nm, self.decimals_inv_nm)


#: The reciprocal-length unit label inside a :class:`UnitText`.
RECIPROCAL_UNIT = Reciprocal()


@dataclass(frozen=True)
class UnitText:
    """Prose that quotes reciprocal lengths, kept so that it can be written in any display units.

    ``parts`` are plain strings and :class:`Reciprocal` values. ``str()`` is the text in nm (as
    stored in JSON); :meth:`text` writes it in the chosen units.

    >>> t = UnitText(("220 at ", Reciprocal(5.6419), " ", RECIPROCAL_UNIT)) + ": not seen"
    >>> str(t), t.text(UNITS["angstrom"], "unicode")
    ('220 at 5.64 1/nm: not seen', '220 at 0.564 1/Å: not seen')
    """

    parts: tuple = ()

    def text(self, units: Units | None = None, style: str = "plain") -> str:
        u = UNITS["nm"] if units is None else units
        return "".join(p if isinstance(p, str) else p.text(u, style) for p in self.parts)

    def __str__(self) -> str:
        return self.text()

    def __add__(self, other) -> "UnitText":
        return UnitText(self.parts + (other.parts if isinstance(other, UnitText) else (str(other),)))

    def __radd__(self, other) -> "UnitText":
        return UnitText((str(other),) + self.parts)

    @staticmethod
    def join(separator: str, items) -> "UnitText":
        """``separator.join(items)`` for UnitText and str items."""
        out = UnitText()
        for k, item in enumerate(items):
            out = (out + separator if k else out) + item
        return out
