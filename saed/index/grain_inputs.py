"""What a grain series needs of its measured patterns before indexing: one voltage, all or none
calibrated, and the holder alpha-axis direction on each detector (shared by ``saed grain`` and the
page of ``saed serve``)."""

from __future__ import annotations

from saed.errors import InputError

__all__ = ["series_alpha_axes"]


def series_alpha_axes(names, measured, given_axis_deg: float | None, how_to_give: str) -> tuple[list[float], str]:
    """Check the series and return each pattern's alpha-axis azimuth (deg) and a note ('' if all known).

    The axis is `given_axis_deg` when given, else the pattern's calibration, else +x (0 deg) with a note
    naming the patterns and `how_to_give` it. InputError (one line) on mixed voltages or calibrations.
    """
    volts = {round(m.calibration.voltage_kv, 6) for m in measured}
    if len(volts) > 1:
        raise InputError(f"the calibrations give different voltages ({', '.join(f'{v:g}' for v in sorted(volts))} kV): "
                         "a grain series is recorded at one voltage")
    calibrated = [m.calibration.is_calibrated for m in measured]
    if any(calibrated) and not all(calibrated):
        raise InputError("some images are calibrated and others not: give a calibration for every image")
    axes, missing = [], []
    for name, m in zip(names, measured):
        a = given_axis_deg if given_axis_deg is not None else m.calibration.alpha_axis_deg
        if a is None:
            missing.append(str(name))
        axes.append(0.0 if a is None else float(a))
    note = ""
    if missing:
        note = (f"alpha axis: not known for {', '.join(missing)}; taken along +x (0 deg). {how_to_give} "
                "(a wrong axis leaves no joint solution)")
    return axes, note
