"""The joint indexing of one marked grain for the page: the solver of ``saed grain`` on the marked patterns.

The patterns marked with one grain name (``POST /api/grain/{id}``) are indexed again as ``saed grain``
indexes them (more candidates per pattern, no single-pattern look-alike search), each with the page's
calibration resolved per file and the holder's alpha-axis direction of the settings (else the file's
calibration, else +x with a note), on the server's warm tables; then
:func:`saed.index.grain.solve_grain` finds the phase and the one orientation. The answer is the
``saed grain`` JSON (docs/contract.md) with the terminal summary as ``summary`` text (plain minus signs)
and as ``summary_display`` (overbarred indices, what the page shows).
"""

from __future__ import annotations

from saed.errors import InputError, SaedError

__all__ = ["grain_index"]


def _marked(service, grain: str) -> list:
    """The records marked `grain`, oldest first (the first one sets the reported frame)."""
    return [r for r in reversed(service.store.newest_first()) if r.grain and r.grain.get("grain") == grain]


def grain_index(service, grain: str) -> dict:
    """The ``saed grain`` document of the patterns marked `grain`; InputError (one line) on bad input."""
    from saed.index import index_pattern
    from saed.index.grain import GrainPattern, solve_grain
    from saed.index.grain_inputs import series_alpha_axes
    from saed.report.grain_json import grain_json
    from saed.report.grain_summary import format_grain_summary
    from saed.serve.engine import max_g_for_pattern, measure_file

    grain = str(grain).strip()
    recs = _marked(service, grain)
    if not recs:
        raise InputError(f"no pattern is marked as grain {grain!r}: mark at least two with their holder readings")
    if len(recs) < 2:
        raise InputError(f"grain {grain!r} has one marked pattern ({recs[0].image}): joint indexing needs at least two "
                         "patterns of the grain at different holder readings")
    for r in recs:
        if r.status in ("error", "waiting", "indexing"):
            why = f": {r.error}" if r.error else ""
            raise InputError(f"{r.image} in grain {grain!r} is not indexed ({r.status}{why}); unmark it or fix it first")
        if r.grain.get("alpha_deg") is None or r.grain.get("beta_deg") is None:
            raise InputError(f"{r.image} in grain {grain!r} has no holder readings: mark it again with alpha and beta")
    tilts = [(float(r.grain["alpha_deg"]), float(r.grain["beta_deg"])) for r in recs]
    if len(set(tilts)) == 1:
        raise InputError(f"every pattern of grain {grain!r} has the same holder readings: a grain series needs "
                         "patterns at different tilts")
    settings = service.settings
    with service.work_lock:
        insps = []
        for r in recs:
            try:
                insps.append(measure_file(r.path, settings)[0])
            except SaedError as exc:  # the page knows the pattern by name, not by its server path
                raise InputError(str(exc).replace(str(r.path), r.image)) from None
        axes, note = series_alpha_axes([r.image for r in recs], [i.measured for i in insps], settings.alpha_axis_deg,
                                       "Set the holder alpha-axis direction in the page's settings")
        voltage = insps[0].measured.calibration.voltage_kv
        reach = (service.max_g_inv_nm if service.max_g_inv_nm is not None
                 else max(max_g_for_pattern(i.measured) for i in insps))
        tables = service.cache.get(settings.phases, voltage, reach)
        opts = {k: v for k, v in service.options.items() if v is not None}
        pats = [GrainPattern(r.image, t, index_pattern(i.measured, tables, top=max(service.top, 10), lookalikes=False,
                                                       holder_alpha_axis_deg=ax, **opts), ax)
                for r, t, i, ax in zip(recs, tilts, insps, axes)]
        result = solve_grain(pats, tables, voltage_kv=voltage)
    doc = grain_json(result)
    if note:
        doc["notes"] = [note]
    doc["grain"] = grain
    doc["summary"] = format_grain_summary(result, alpha_axis_note=note)
    # what the page shows: the same text with overbarred indices, as every other index on the page
    doc["summary_display"] = format_grain_summary(result, alpha_axis_note=note, style="unicode")
    return doc
