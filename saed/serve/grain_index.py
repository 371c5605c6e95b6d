"""The joint indexing of one marked grain for the page: the solver of ``saed grain`` on the marked patterns.

The patterns marked with one grain name (``POST /api/grain/{id}``) are indexed again as ``saed grain``
indexes them (more candidates per pattern, no single-pattern look-alike search), each with the page's
calibration resolved per file and the holder's alpha-axis direction of the settings (else the file's
calibration, else +x with a note), on the server's warm tables; then
:func:`saed.index.grain.solve_grain` finds the phase and the one orientation. The answer is the
``saed grain`` JSON (docs/contract.md) with the terminal summary as ``summary`` text.
"""

from __future__ import annotations

from saed.errors import InputError

__all__ = ["grain_index"]


def _marked(service, grain: str) -> list:
    """The records marked `grain`, oldest first (the first one sets the reported frame)."""
    return [r for r in reversed(service.store.newest_first()) if r.grain and r.grain.get("grain") == grain]


def grain_index(service, grain: str) -> dict:
    """The ``saed grain`` document of the patterns marked `grain`; InputError (one line) on bad input."""
    from saed.index import index_pattern
    from saed.index.grain import GrainPattern, solve_grain
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
            except InputError as exc:
                raise InputError(str(exc).replace(str(r.path), r.image)) from None
        volts = {round(i.measured.calibration.voltage_kv, 6) for i in insps}
        if len(volts) > 1:
            raise InputError(f"the patterns of grain {grain!r} have different voltages "
                             f"({', '.join(f'{v:g}' for v in sorted(volts))} kV): a grain series is recorded at one")
        calibrated = [i.measured.calibration.is_calibrated for i in insps]
        if any(calibrated) and not all(calibrated):
            raise InputError(f"some patterns of grain {grain!r} are calibrated and others not: calibrate every one")
        axes, missing = [], []
        for r, i in zip(recs, insps):
            a = settings.alpha_axis_deg if settings.alpha_axis_deg is not None else i.measured.calibration.alpha_axis_deg
            if a is None:
                missing.append(r.image)
            axes.append(0.0 if a is None else float(a))
        note = ""
        if missing:
            note = (f"alpha axis: not known for {', '.join(missing)}; taken along +x (0 deg). Set the holder alpha-axis "
                    "direction in the settings (a wrong axis leaves no joint solution)")
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
    return doc
