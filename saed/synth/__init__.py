"""Synthetic recorded patterns with their ground truth: the one detector forward model of saed.

Every picture saed makes of a pattern (tests, benchmarks, the demo's example images and
``saed simulate --image``) goes through :func:`saed.synth.detector.render_pattern`: centre, camera
constant (scale), ellipse, spot shape, direct beam, haze, beam stop and counting noise live there
and nowhere else. The model sits in synth/ and not in simulate/ because it is instrument, not
physics: simulate/ computes where reflections are in reciprocal space (1/nm); synth/ turns that into
detector pixels, and synth/ already held the fuller model (counting statistics, beam stop, ellipse)
that the image-stage tests were built on. :func:`saed.synth.zone.zone_offsets_px` is the one mapping
from a zone pattern to pixel offsets.

:mod:`saed.synth.detector` renders spots through a detector model (haze, noise, saturation, beam
stop, ellipse, mistilt, hot pixels); :mod:`saed.synth.lattice` makes plain 2-D lattices;
:mod:`saed.synth.zone` renders a simulated :class:`saed.simulate.zone.ZonePattern`;
:mod:`saed.synth.rings` (the ring helper's) renders polycrystalline ring patterns;
:mod:`saed.synth.kinematic` makes spot lists and images of a zone pattern with known truth (matcher tests,
benchmarks); :mod:`saed.synth.overlap` does the same for overlapping crystals; :mod:`saed.synth.demo_set`
makes the demo's example patterns. None of these live in index/: the generators of test inputs stay
outside the code they test.
"""

from saed.synth.detector import BeamStop, Detector, Scene, SynthPattern, distortion_matrix, render_pattern
from saed.synth.lattice import LatticeSpots, lattice_spots, neighbour_grain_spots, render_lattice

__all__ = ["BeamStop", "Detector", "Scene", "SynthPattern", "distortion_matrix", "render_pattern",
           "LatticeSpots", "lattice_spots", "neighbour_grain_spots", "render_lattice"]
