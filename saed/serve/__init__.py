"""``saed serve``: a local web page that indexes each pattern as it is saved, with warm tables.

Layers (each module one job):

* :mod:`saed.serve.settings` - what the operator sets on the page (phases, calibration, voltage,
  holder axis), checked, and remembered in a small JSON file;
* :mod:`saed.serve.engine` - the warm per-phase tables (built once, with progress) and the work of
  indexing one file into a :class:`~saed.serve.records.Record`;
* :mod:`saed.serve.records` - the thread-safe list of results the page shows, and grain marks;
* :mod:`saed.serve.watch` - the watched (acquisition) folder: each new file once completely written;
* :mod:`saed.serve.grain_index` - the joint indexing of the patterns marked as one grain (``saed grain``'s solver);
* :mod:`saed.serve.saving` - the HTML report and JSON beside the pattern, never overwriting;
* :mod:`saed.serve.service` - the state of one server and the work behind each route;
* :mod:`saed.serve.guard` - the request guards: Host header, same origin, token, upload size;
* :mod:`saed.serve.app` - the Starlette application (routes of docs/contract.md, static page);
* :mod:`saed.serve.runner` - listening (port in use: one line), in the foreground or a thread;
* :mod:`saed.serve.browser` - headless Chromium for the browser tests and ``saed bench``.

The page itself (``static/``: HTML, CSS, JS) is plain files shipped in the package: no build step,
nothing fetched from the network.
"""
