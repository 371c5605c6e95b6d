"""A bare element symbol given as a phase ('Co') stands for every built-in phase of that element.

``--phase Co`` is what a microscopist types when the question is "which cobalt is this?"; it
expands to Co-fcc and Co-hcp rather than failing or silently picking one.
"""

from __future__ import annotations

__all__ = ["expand_phase_spec"]


def expand_phase_spec(spec: str, names: list[str]) -> list[str] | None:
    """The built-in `names` that the bare element or compound `spec` stands for, or None.

    None means `spec` is not such a group: it is a built-in name itself, a path, or unknown
    (and is then loaded, or refused, as it is). A group is every name whose part before the
    first '-' equals `spec`, case-insensitive, when there is no built-in of exactly that name.

    >>> expand_phase_spec("co", ["Cu", "Co-fcc", "Fe-bcc", "Co-hcp"])
    ['Co-fcc', 'Co-hcp']
    >>> expand_phase_spec("Cu", ["Cu", "Co-fcc"]) is None
    True
    >>> expand_phase_spec("C", ["Co-fcc", "C-diamond"])
    ['C-diamond']
    """
    s = str(spec).strip()
    if not s or "/" in s or "\\" in s or s.lower().endswith(".cif"):
        return None
    if s.lower() in {n.lower() for n in names}:
        return None
    group = [n for n in names if "-" in n and n.split("-", 1)[0].lower() == s.lower()]
    return group or None
