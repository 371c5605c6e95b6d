"""What a crystal should show: kinematic simulation, no recorded image involved.

* :mod:`~saed.simulate.zone` -- zone-axis patterns: zero- and higher-order Laue zones, excitation
  errors, double diffraction; :mod:`~saed.simulate.geometry` -- orientation matrices and frames;
* :mod:`~saed.simulate.families` -- zone families and standard patterns; :mod:`~saed.simulate.zonemap`
  -- zone maps; :mod:`~saed.simulate.rings` -- the rings of a polycrystal and where a ring lies on
  the detector (shared by the ring generator and the ring measurement);
* :mod:`~saed.simulate.detector` -- a simulated pattern as a detector image;
* :mod:`~saed.simulate.tilt` -- the double-tilt holder: readings that bring a zone on the beam, the
  zones within reach, and the plan when a zone is out of reach.

Pictures and JSON of these are made in :mod:`saed.report`; synthetic *recorded* patterns with known
truth (for tests) in :mod:`saed.synth`.
"""

from saed.simulate.zone import ZonePattern, zone_pattern

__all__ = ["ZonePattern", "zone_pattern"]
