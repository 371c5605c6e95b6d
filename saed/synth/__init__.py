"""Synthetic recorded patterns with their ground truth, for the tests and benchmarks of the image stage.

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
