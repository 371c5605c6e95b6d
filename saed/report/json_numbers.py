"""Numbers as the JSON documents write them: rounded floats (null for NaN or infinity) and int lists.

Shared by the schema modules of report/ (``*_json.py``), so every command rounds the same way.
"""

from __future__ import annotations

import math

__all__ = ["json_float", "json_ints"]


def json_float(v, nd: int = 6):
    """`v` rounded to `nd` decimals, or None for None, NaN and infinity (JSON has no NaN).

    >>> json_float(0.123456789), json_float(float("nan")), json_float(2.5, 0)
    (0.123457, None, 2.0)
    """
    if v is None:
        return None
    v = float(v)
    return round(v, nd) if math.isfinite(v) else None


def json_ints(v):
    """A list of Python ints (None stays None).

    >>> json_ints((1.0, -2, 0)), json_ints(None)
    ([1, -2, 0], None)
    """
    return None if v is None else [int(x) for x in v]
