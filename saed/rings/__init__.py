"""Ring patterns of polycrystalline films: the one package for ring measurement, with identification on top.

Measurement (detector pixels in, rings out; no crystal knowledge):

* :mod:`saed.rings.profile` -- azimuthal integration: the radial profile and the sector profiles about a
  centre, the projector ellipse undone;
* :mod:`saed.rings.peaks` -- rings in a radial profile: SNIP background, detection, sub-pixel radii;
* :mod:`saed.rings.geometry` -- centre and ellipse fitted from the rings themselves;
* :mod:`saed.rings.measure` -- the whole measurement: mask, centre, ellipse, profile, rings.

Identification, built on the measurement:

* :mod:`saed.rings.match` -- how well a phase (or two) explains the measured rings, at which scale;
* :mod:`saed.rings.identify` -- candidates and two-phase mixtures ranked.

Built on top elsewhere: calibration from a ring standard (:mod:`saed.calibrate.rings`), the picture
(:mod:`saed.report.rings_plot`), the command (``saed rings``).

Where the ring geometry lives, and why not here: the rings a phase gives (|g|, d, families,
m |F|^2 d^2) and where a ring of corrected radius R lies on the detector (``polar_coordinates``,
``ring_outline_px``) are in :mod:`saed.simulate.rings`. The synthetic ring generator
(:mod:`saed.synth.rings`) needs both, and synth/ sits below this package in the layers
(physics -> crystal -> simulate / image / synth -> index / rings -> calibrate -> report, batch,
serve, cli), so it may not import from here; simulate/ is the layer both may use. No module in
image/ used the azimuthal profile (the spot-pattern background of :mod:`saed.image.background` has
its own robust radial statistic, :func:`saed.image.binning.radial_quantile_profile`, on a binned
copy), so the profile moved here from image/. The ellipse convention itself is
:meth:`saed.calibration.Ellipse.corrected_px`, shared with spot measurement and indexing.
"""
