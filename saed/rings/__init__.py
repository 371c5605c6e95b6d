"""Polycrystalline ring patterns: measuring the rings and telling which phases made them.

* :mod:`~saed.rings.profile` -- azimuthal integration (corrected radius, masks, ellipse undone);
* :mod:`~saed.rings.peaks` -- rings in a radial profile: background and sub-pixel radii;
* :mod:`~saed.rings.geometry` -- centre and elliptical distortion from the rings themselves;
* :mod:`~saed.rings.measure` -- all of it, from a recorded pattern to rings;
* :mod:`~saed.rings.match`, :mod:`~saed.rings.identify` -- how well phases (alone or two as a mixture)
  explain the rings, and at which scale.

The rings a phase should give are simulated in :mod:`saed.simulate.rings`; calibration from a ring
standard is in :mod:`saed.calibrate.rings`, the plots in :mod:`saed.report`.
"""
