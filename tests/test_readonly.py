"""Read-only arrays are made in one place (issue: `flags.writeable = False` had spread to 35 sites)."""

from pathlib import Path

import numpy as np
import pytest

import saed
from saed.readonly import freeze_in_place, frozen_array


def test_no_module_sets_writeable_by_hand():
    root = Path(saed.__file__).parent
    offenders = [str(p.relative_to(root)) for p in root.rglob("*.py")
                 if p.name != "readonly.py" and "writeable = False" in p.read_text(encoding="utf-8")]
    assert offenders == []


def test_frozen_array_copies_and_freeze_in_place_does_not():
    src = np.arange(3.0)
    out = frozen_array(src)
    assert out is not src and src.flags.writeable
    freeze_in_place(src)
    with pytest.raises(ValueError, match="read-only"):
        src[0] = 1.0
