"""Detector calibration: which scale, centre and ellipse a pattern gets, and how they are measured.

* :mod:`~saed.calibrate.resolve` -- the order in which an image's calibration is found (options,
  calibration file, sidecar, file metadata, history);
* :mod:`~saed.calibrate.rings` -- from the ring pattern of a polycrystalline standard (on :mod:`saed.rings`);
* :mod:`~saed.calibrate.zone` -- from a zone-axis pattern of a single-crystal standard (on :mod:`saed.image`);
* :mod:`~saed.calibrate.history` -- one file per calibration, listed per camera length;
* :mod:`~saed.calibrate.checks` -- plausibility warnings for a new calibration.

The :class:`~saed.calibration.Calibration` value itself and its file format live in :mod:`saed.calibration`.
"""
