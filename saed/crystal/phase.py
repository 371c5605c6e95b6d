"""A crystal phase: lattice + space group + atom sites, from the built-in table or a CIF.

The built-in table (``saed/data/phases.json``) has a source for every lattice
parameter. CIFs are read with gemmi. Atom sites are expanded to the full
conventional cell with the space group's operations (including centring).
"""

from __future__ import annotations

import difflib
import json
import logging
import math
import re
from dataclasses import dataclass, field
from functools import lru_cache
from importlib import resources
from pathlib import Path

import numpy as np

from saed.crystal.lattice import Lattice
from saed.crystal.scattering import element_symbol
from saed.crystal.symmetry import space_group
from saed.errors import PhaseError
from saed.readonly import freeze_in_place

logger = logging.getLogger(__name__)

__all__ = ["Site", "Phase", "CellAtoms", "builtin_phase", "builtin_names", "load_phase", "cell_atoms",
           "cell_centring", "space_group_in_cell", "suggest_builtin"]

#: Isotropic Debye-Waller B used when a source gives none: 0.5 A^2 = 0.005 nm^2,
#: a typical room-temperature value for metals (common practice).
DEFAULT_B_ISO_NM2 = 0.005


@dataclass(frozen=True)
class Site:
    """One asymmetric-unit atom site: element, fractional position, occupancy, isotropic B (nm^2)."""

    element: str
    x: float
    y: float
    z: float
    occupancy: float = 1.0
    b_iso_nm2: float = DEFAULT_B_ISO_NM2
    label: str = ""

    def __post_init__(self):
        object.__setattr__(self, "element", element_symbol(self.element))
        for name in ("x", "y", "z", "occupancy", "b_iso_nm2"):
            v = float(getattr(self, name))
            if not math.isfinite(v):
                raise PhaseError(f"site {self.label or self.element}: {name} = {v!r} is not a finite number")
            object.__setattr__(self, name, v)
        if not 0.0 <= self.occupancy <= 1.0 + 1e-6:
            raise PhaseError(f"site {self.label or self.element}: occupancy {self.occupancy} must lie in 0..1")
        if self.b_iso_nm2 < 0:
            raise PhaseError(f"site {self.label or self.element}: negative Debye-Waller B {self.b_iso_nm2} nm^2")


@dataclass(frozen=True)
class Phase:
    """A crystal phase. Hashable (and so usable as a cache key): every field is immutable.

    ``space_group`` is a Hermann-Mauguin symbol gemmi understands (e.g. ``'F m -3 m'``,
    ``'R -3 c:H'``). ``source`` says where the numbers come from.
    """

    name: str
    lattice: Lattice
    space_group: str
    sites: tuple[Site, ...]
    structure_type: str = ""
    source: str = ""
    note: str = field(default="", compare=False)

    def __post_init__(self):
        sg = space_group(self.space_group)
        object.__setattr__(self, "space_group", sg.xhm())
        object.__setattr__(self, "sites", tuple(self.sites))
        if not self.sites:
            raise PhaseError(f"phase {self.name!r} has no atom sites")
        if all(s.occupancy <= 0 for s in self.sites):
            raise PhaseError(f"phase {self.name!r}: every site has zero occupancy, nothing would scatter")
        system = _system_of(sg)
        got = self.lattice.crystal_system
        compatible = {
            "cubic": {"cubic"},
            "hexagonal": {"hexagonal"},
            "trigonal": {"hexagonal", "trigonal"},
            "tetragonal": {"tetragonal", "cubic"},
            "orthorhombic": {"orthorhombic", "tetragonal", "cubic"},
            "monoclinic": {"monoclinic", "orthorhombic", "tetragonal", "cubic", "hexagonal"},
            "triclinic": {"triclinic", "monoclinic", "orthorhombic", "tetragonal", "cubic", "hexagonal", "trigonal"},
        }[system]
        if got not in compatible:
            raise PhaseError(
                f"phase {self.name!r}: cell ({self.lattice.a_nm:g}, {self.lattice.b_nm:g}, {self.lattice.c_nm:g} nm; "
                f"{self.lattice.alpha_deg:g}, {self.lattice.beta_deg:g}, {self.lattice.gamma_deg:g} deg) is {got}, "
                f"but space group {self.space_group} is {system}"
            )

    @property
    def space_group_number(self) -> int:
        return space_group(self.space_group).number

    @property
    def space_group_short(self) -> str:
        """Short Hermann-Mauguin symbol without spaces, e.g. 'Fm-3m', 'P63/mmc'."""
        return "".join(space_group(self.space_group).hm.split())

    @property
    def is_hexagonal(self) -> bool:
        """True when the phase uses hexagonal axes (hexagonal, or trigonal on hexagonal axes)."""
        return self.lattice.is_hexagonal_axes


def _system_of(sg) -> str:
    s = sg.crystal_system_str()
    if s == "trigonal" and sg.hm.startswith("R") and not sg.xhm().endswith(":H"):
        return "trigonal"
    return "hexagonal" if s == "trigonal" else s


@dataclass(frozen=True)
class CellAtoms:
    """All atoms of the conventional cell: fractional positions (n, 3), elements, occupancies, B (nm^2)."""

    frac: np.ndarray
    elements: tuple[str, ...]
    occupancy: np.ndarray
    b_iso_nm2: np.ndarray


@lru_cache(maxsize=256)
def cell_atoms(phase: Phase) -> CellAtoms:
    """Expand the asymmetric-unit sites of `phase` to the full conventional cell (symmetry + centring).

    A site within SPECIAL_POSITION_TOL_NM of a special position is first moved onto it (the mean of
    its images that fall on it, which the site-symmetry group leaves fixed): CIF coordinates such as
    0.3333 for 1/3 would otherwise leave the site-specific extinctions (hcp 30-31, diamond 222) at
    |F| ~ 1e-4 of sum |f| instead of zero, and mark them allowed.
    """
    rot, tran = _operations(phase.space_group)
    to_cart = phase.lattice.direct_matrix_nm
    frac, els, occ, bs = [], [], [], []
    for site in phase.sites:
        p = _onto_special_position(np.array([site.x, site.y, site.z]), rot, tran, to_cart)
        images = (rot @ p + tran) % 1.0
        d = (images[:, None, :] - images[None, :, :] + 0.5) % 1.0 - 0.5
        close = np.linalg.norm(d @ to_cart.T, axis=-1) < SPECIAL_POSITION_TOL_NM
        kept = ~np.any(np.tril(close, k=-1), axis=1)  # the first image of each coinciding group
        for q in images[kept]:
            frac.append(q)
            els.append(site.element)
            occ.append(site.occupancy)
            bs.append(site.b_iso_nm2)
    out = CellAtoms(np.array(frac), tuple(els), np.array(occ), np.array(bs))
    freeze_in_place(out.frac, out.occupancy, out.b_iso_nm2)
    return out


#: Symmetry images of one site closer than this (nm) are one atom on a special position.
#: 0.01 nm = 0.1 A absorbs coordinates rounded to 3 decimals (0.333 for 1/3) in cells up to
#: about 3 nm, and stays below the 0.2-0.5 A spacing of split (disordered) sites.
SPECIAL_POSITION_TOL_NM = 0.01


#: centring translations a primitive-group cell may carry on top of its lattice (the cell is then a supercell)
_CENTRINGS = (("F", ((0, .5, .5), (.5, 0, .5), (.5, .5, 0))), ("I", ((.5, .5, .5),)), ("C", ((.5, .5, 0),)),
              ("A", ((0, .5, .5),)), ("B", ((.5, 0, .5),)))


def cell_centring(phase: Phase) -> str:
    """The lattice letter of the cell as filled: the space group's own, or, for a primitive group whose
    cell content repeats under a centring translation, that centring (TiAl's 4-atom cell: 'C')."""
    own = phase.space_group_short[0]
    atoms = cell_atoms(phase)
    if own != "P" or len(atoms.elements) < 2:
        return own
    frac = np.asarray(atoms.frac) % 1.0
    els = np.asarray(atoms.elements)

    def repeats(t) -> bool:
        d = ((frac + np.asarray(t)) % 1.0)[:, None, :] - frac[None, :, :]
        d = (d + 0.5) % 1.0 - 0.5
        same = (np.abs(d).max(-1) < 1e-6) & (els[:, None] == els[None, :])
        return bool(np.all(same.any(axis=1)))

    for letter, ts in _CENTRINGS:
        if all(repeats(t) for t in ts):
            return letter
    return "P"


def space_group_in_cell(phase: Phase) -> str:
    """The short space-group symbol as written in the cell saed uses: 'C4/mmm' for TiAl's C-centred 4-atom
    cell of P4/mmm (No. 123), else the symbol itself."""
    letter = cell_centring(phase)
    return phase.space_group_short if letter == phase.space_group_short[0] else letter + phase.space_group_short[1:]


@lru_cache(maxsize=None)
def _operations(space_group_name: str) -> tuple[np.ndarray, np.ndarray]:
    """All operations of the space group (centring included) as rotations (n, 3, 3) and translations (n, 3)."""
    ops = list(space_group(space_group_name).operations())
    rot = np.array([op.rot for op in ops], dtype=float) / ops[0].DEN
    tran = np.array([op.tran for op in ops], dtype=float) / ops[0].DEN
    freeze_in_place(rot, tran)
    return rot, tran


def _onto_special_position(p: np.ndarray, rot: np.ndarray, tran: np.ndarray, to_cart: np.ndarray) -> np.ndarray:
    d = (rot @ p + tran - p + 0.5) % 1.0 - 0.5  # each image relative to p, nearest lattice copy
    near = np.linalg.norm(d @ to_cart.T, axis=1) < SPECIAL_POSITION_TOL_NM
    return p + d[near].mean(axis=0)  # the identity is always among them


# ---------------------------------------------------------------------- built-in table
@lru_cache(maxsize=1)
def _table() -> dict[str, dict]:
    text = resources.files("saed").joinpath("data/phases.json").read_text(encoding="utf-8")
    rows = json.loads(text)["phases"]
    return {row["name"]: row for row in rows}


def builtin_names() -> list[str]:
    """Names of the built-in phases, in table order."""
    return list(_table())


@lru_cache(maxsize=None)
def builtin_phase(name: str) -> Phase:
    """The built-in phase called `name` (case-insensitive), or PhaseError with a 'did you mean'."""
    table = _table()
    key = {k.lower(): k for k in table}.get(str(name).strip().lower())
    if key is None:
        close = suggest_builtin(str(name))
        hint = f"; did you mean {' or '.join(close)}?" if close else ""
        raise PhaseError(f"unknown phase {name!r}{hint} (see 'saed phases', or give a CIF path)")
    row = table[key]
    lat = Lattice(row["a_nm"], row.get("b_nm", row["a_nm"]), row.get("c_nm", row["a_nm"]),
                  row.get("alpha_deg", 90.0), row.get("beta_deg", 90.0), row.get("gamma_deg", 90.0))
    sites = tuple(
        Site(s["element"], *s["xyz"], occupancy=s.get("occupancy", 1.0),
             b_iso_nm2=s.get("b_iso_nm2", DEFAULT_B_ISO_NM2), label=s.get("label", s["element"]))
        for s in row["sites"]
    )
    return Phase(row["name"], lat, row["space_group"], sites, row.get("structure_type", ""),
                 row.get("source", ""), row.get("note", ""))


#: Element names that people type for symbols (only elements of the built-in table).
_ELEMENT_WORDS = {
    "aluminium": "al", "aluminum": "al", "copper": "cu", "nickel": "ni", "silver": "ag", "gold": "au",
    "platinum": "pt", "palladium": "pd", "lead": "pb", "iron": "fe", "cobalt": "co", "chromium": "cr",
    "molybdenum": "mo", "tungsten": "w", "niobium": "nb", "tantalum": "ta", "vanadium": "v",
    "magnesium": "mg", "titanium": "ti", "zirconium": "zr", "zinc": "zn", "beryllium": "be",
    "cadmium": "cd", "silicon": "si", "germanium": "ge", "carbon": "c", "polonium": "po",
    "α": "alpha", "β": "beta", "γ": "gamma",
}

#: Other words that name a built-in phase: minerals, metallurgical names, Greek-letter polymorphs.
_PHASE_WORDS = {
    "Fe-fcc": ("austenite", "gamma"), "Fe-bcc": ("ferrite", "alpha"), "Co-fcc": ("beta",),
    "Co-hcp": ("alpha", "epsilon"), "Ti-hcp": ("alpha",), "Zr-hcp": ("alpha",),
    "NaCl": ("halite", "rocksalt"), "MgO": ("periclase",), "TiN": ("osbornite",), "NiO": ("bunsenite",),
    "CaF2": ("fluorite",), "CeO2": ("ceria",), "ZnS": ("sphalerite", "zincblende"),
    "Ni3Al": ("gamma'", "gamma-prime"), "TiAl": ("gamma",),
    "Al2O3": ("corundum", "alumina", "sapphire", "alpha"), "TiO2-rutile": ("titania",),
}


def _words(text: str) -> tuple[str, ...]:
    """Lower-case words of a phase name, element names turned into symbols: 'Cobalt_FCC' -> ('co', 'fcc')."""
    parts = [w for w in re.split(r"[\s_\-/,;:()]+", text.strip().lower()) if w]
    out = []
    for w in parts:
        if w not in _ELEMENT_WORDS and len(w) > 4:  # a misspelt name: 'nickle', 'cobolt', 'austenit'
            vocabulary = list(_ELEMENT_WORDS) + [v for vs in _PHASE_WORDS.values() for v in vs]
            w = next(iter(difflib.get_close_matches(w, vocabulary, n=1, cutoff=0.8)), w)
        out.append(_ELEMENT_WORDS.get(w, w))
    return tuple(sorted(out))


def suggest_builtin(name: str, *, n: int = 3) -> list[str]:
    """Built-in phase names that `name` probably meant, best first (at most `n`).

    Case, '-', '_', spaces, word order and element names do not matter ('co_fcc', 'fcc Co',
    'Cobalt-fcc' -> Co-fcc); a name that is part of several ('Co') gives all of them; typos
    ('Ni3AI', 'SrTi03') are caught by difflib's ratio on the normalised words.

    >>> suggest_builtin("cobalt")
    ['Co-fcc', 'Co-hcp']
    >>> suggest_builtin("fcc_co")
    ['Co-fcc']
    """
    query = _words(name)
    if not query:
        return []
    names = list(_table())
    own = {k: _words(k) for k in names}
    every = {k: set(own[k]) | set(_PHASE_WORDS.get(k, ())) for k in names}
    exact = [k for k in names if own[k] == query]
    inside = [k for k in names if set(query) <= every[k]]
    flat = {"".join(v): k for k, v in own.items()}
    close = [flat[m] for m in difflib.get_close_matches("".join(query), list(flat), n=n, cutoff=0.75)]
    out: list[str] = []
    for k in exact + inside + close:
        if k not in out:
            out.append(k)
    return out[:n]


# ---------------------------------------------------------------------- CIF
#: Cell lengths a CIF may give, Angstrom: no crystal has an edge below 1 A (the shortest bonds are
#: about 0.74 A, and a cell holds at least one atom with its neighbours beyond it), and above 1000 A
#: (large protein cells) no electron-diffraction pattern could be indexed spot by spot.
CIF_CELL_LENGTH_A = (1.0, 1000.0)


def phase_from_cif(path: str | Path, *, name: str | None = None) -> Phase:
    """Load a phase from a CIF file with gemmi; every failure becomes a one-line PhaseError."""
    import gemmi

    p = Path(path)
    if not p.is_file():
        raise PhaseError(f"{path}: no such CIF file")
    try:
        raw = p.read_bytes()
    except OSError as exc:
        raise PhaseError(f"{path}: cannot read the file ({_one_line(exc)})") from None
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError:
        # CIF 1.1 is ASCII and CIF 2 UTF-8, but older programs write Latin-1 (A-ring, degree sign) in
        # comments and names; gemmi would then raise UnicodeDecodeError from deep inside its accessors.
        logger.warning("%s: not UTF-8 text, read as Latin-1", path)
        text = raw.decode("latin-1")
    try:
        doc = gemmi.cif.read_string(text)
    except (RuntimeError, ValueError, UnicodeError) as exc:
        # gemmi names the parsed text 'string:LINE:COL(OFFSET)'; say 'line LINE' instead
        where = re.sub(r"^string:(\d+):\S*\s*", r"line \1: ", _one_line(exc))
        raise PhaseError(f"{path}: not a readable CIF ({where})") from None
    blocks = [b for b in doc if b.find_value("_cell_length_a") is not None] or list(doc)
    if not blocks:
        raise PhaseError(f"{path}: the CIF has no data block")
    block = blocks[0]
    for tag in ("_cell_length_a", "_cell_length_b", "_cell_length_c",
                "_cell_angle_alpha", "_cell_angle_beta", "_cell_angle_gamma"):
        if block.find_value(tag) in (None, "?", "."):
            raise PhaseError(f"{path}: the CIF has no {tag}")
    try:
        small = gemmi.make_small_structure_from_block(block)
    except (RuntimeError, ValueError, IndexError, UnicodeError) as exc:
        raise PhaseError(f"{path}: cannot read the structure ({_one_line(exc)})") from None
    cell = small.cell
    for label, v in (("a", cell.a), ("b", cell.b), ("c", cell.c)):
        if not CIF_CELL_LENGTH_A[0] <= v <= CIF_CELL_LENGTH_A[1]:
            raise PhaseError(f"{path}: cell parameter {label} = {v:g} A lies outside {CIF_CELL_LENGTH_A[0]:g}-"
                             f"{CIF_CELL_LENGTH_A[1]:g} A: not a crystal cell (check the unit: the CIF gives Angstrom)")
    lat = Lattice(cell.a / 10.0, cell.b / 10.0, cell.c / 10.0, cell.alpha, cell.beta, cell.gamma)  # A -> nm
    sg_name = _cif_space_group(block, small)
    if sg_name is None:
        raise PhaseError(f"{path}: the CIF names no space group (_space_group_name_H-M_alt or _symmetry_space_group_name_H-M)")
    sg = space_group(sg_name)
    if sg.hm.startswith("R") and lat.crystal_system == "hexagonal" and not sg.xhm().endswith(":H"):
        sg_name = sg.hm + ":H"
    sites = []
    for s in small.sites:
        b_nm2 = DEFAULT_B_ISO_NM2
        if s.u_iso and s.u_iso > 0:
            b_nm2 = 8.0 * math.pi**2 * s.u_iso / 100.0  # U in A^2 -> B in nm^2
        el = s.type_symbol or s.element.name or s.label
        sites.append(Site(el, s.fract.x, s.fract.y, s.fract.z, occupancy=s.occ, b_iso_nm2=b_nm2, label=s.label))
    if not sites:
        raise PhaseError(f"{path}: the CIF lists no atom sites (_atom_site_fract_x ...)")
    title = name or block.name or p.stem
    return Phase(title, lat, sg_name, tuple(sites), structure_type="", source=f"CIF {p.name}")


def _cif_space_group(block, small) -> str | None:
    """The space group of a CIF block, as a gemmi extended H-M symbol.

    gemmi's own determination comes first: the symmetry operations listed in the CIF
    (``_space_group_symop_operation_xyz``), then the Hall symbol, then the H-M symbol with
    the CIF default setting (origin choice 2, hexagonal axes), then the number. Taking the
    bare H-M string instead would read 'F d -3 m' as origin choice 1 and put the atoms of an
    origin-2 CIF (Si at 1/8,1/8,1/8) on the wrong sites.
    """
    sg = small.spacegroup
    if sg is not None:
        try:
            problem = small.check_spacegroup()
        except UnicodeError:  # gemmi can cut a multi-byte character in its own message
            problem = "the symmetry operations are unreadable"
        if problem:
            logger.warning("CIF block %s: %s; using %s", block.name, _one_line(problem), sg.xhm())
        return sg.xhm()
    for tag in ("_space_group_name_H-M_alt", "_symmetry_space_group_name_H-M", "_space_group_name_Hall",
                "_symmetry_space_group_name_Hall", "_space_group_IT_number", "_symmetry_Int_Tables_number"):
        v = block.find_value(tag)
        if v not in (None, "?", "."):
            v = v.strip().strip("'\"")
            if "Hall" in tag:
                import gemmi

                try:
                    return gemmi.find_spacegroup_by_ops(gemmi.symops_from_hall(v)).xhm()
                except (RuntimeError, ValueError, AttributeError, UnicodeError):
                    continue
            return v
    return None


def _one_line(exc: BaseException) -> str:
    return " ".join(str(exc).split())[:200]


def load_phase(spec: str) -> Phase:
    """A built-in phase name or a path to a CIF file.

    A built-in name wins over a file of the same name in the working directory (a stray
    file called 'Si' must not turn ``--phase Si`` into a CIF error); anything ending in
    '.cif' or containing a '/' is always a path.
    """
    s = str(spec)
    if s.lower().endswith(".cif") or "/" in s or "\\" in s:
        return phase_from_cif(s)
    if s.strip().lower() in {k.lower() for k in _table()} or not Path(s).is_file():
        return builtin_phase(s)
    return phase_from_cif(s)
