"""What a crystal should show: kinematic simulation, no recorded image involved.

* :mod:`~saed.simulate.zone` -- zone-axis patterns: zero- and higher-order Laue zones, excitation
  errors, double diffraction; :mod:`~saed.simulate.geometry` -- orientation matrices and frames;
* :mod:`~saed.simulate.families` -- zone families and standard patterns; :mod:`~saed.simulate.zonemap`
  -- zone maps; :mod:`~saed.simulate.rings` -- the rings of a polycrystal and where a ring lies on
  the detector (shared by the ring generator and the ring measurement);
* :mod:`~saed.simulate.tilt` -- the double-tilt holder: readings that bring a zone on the beam, the
  zones within reach, and the plan when a zone is out of reach.

Pictures and JSON of these are made in :mod:`saed.report`. Putting a pattern onto detector pixels is
not done here: :mod:`saed.synth` holds the one detector model (``saed simulate --image`` uses it too),
and makes the synthetic *recorded* patterns with known truth for tests, benchmarks and the demo.
"""

from saed.simulate.zone import ZonePattern, zone_pattern

__all__ = ["ZonePattern", "zone_pattern"]
