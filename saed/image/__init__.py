"""Image stage: what was recorded, from a pattern file to a measured centre, spots and 2-D lattice.

Sits above :mod:`saed.calibration` and below everything that interprets a pattern; it knows no crystal.

* reading: :mod:`~saed.image.io` (TIFF, PNG, JPEG, ``.npy``; microscope formats through rosettasciio in
  :mod:`~saed.image.microscope`, their metadata in :mod:`~saed.image.metadata`), memory estimates
  (:mod:`~saed.image.memory`), binning (:mod:`~saed.image.binning`);
* measuring: masks and beam stop (:mod:`~saed.image.masks`), background (:mod:`~saed.image.background`),
  spots (:mod:`~saed.image.spots`, :mod:`~saed.image.spotfit`), centre (:mod:`~saed.image.centre`),
  the 2-D lattice (:mod:`~saed.image.lattice2d`), all run by :mod:`~saed.image.measure`;
* the values handed on: :mod:`~saed.image.values` (``Spots``, ``LatticeBasis``, ``MeasuredPattern``).

Ring patterns are measured in :mod:`saed.rings`; pictures of what was measured are drawn in
:mod:`saed.report` (``spots_overlay``).
"""
