"""Every output a person or another program reads; nothing here computes a result.

* JSON documents, one schema module per command (CONTRACT.md: keep every field, add freely):
  :mod:`~saed.report.index_json`, :mod:`~saed.report.spots_json`, :mod:`~saed.report.simulate_json`,
  :mod:`~saed.report.tilt_json`, :mod:`~saed.report.phases_json`, :mod:`~saed.report.grain_json`,
  :mod:`~saed.report.crystals_json`, :mod:`~saed.report.ratio_json`, :mod:`~saed.report.rings_json`,
  :mod:`~saed.report.calibrate_json`, :mod:`~saed.report.bench_json`; numbers rounded the same way by :mod:`~saed.report.json_numbers`;
* text for the terminal: ``*_summary.py``, ``crystals_report.py``;
* pictures (matplotlib imported inside the functions): overlays on the recorded pattern
  (:mod:`~saed.report.spots_overlay`, :mod:`~saed.report.index_overlay`), simulated patterns and diagrams
  (``render_*.py``), ring plots, scan maps;
* HTML reports: ``*_html.py``.

Files are written through :mod:`saed.files`.
"""
