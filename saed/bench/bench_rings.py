"""Ring-pattern benchmarks: speed of calibration and identification, and accuracy on generated patterns.

Accuracy cases (run once each; their numbers are printed under the case):

* calibration from a standard (Au or Al film, 1024 x 1024, 0.5-2 % ellipticity at a random angle,
  random centre, scale, texture, graininess, Poisson and read noise): scale error, axis-ratio error;
* ring d-spacings of another specimen recorded in the same session, measured with that calibration
  (its ellipse and scale): error against the specimen's true lines;
* phase identification with that calibration against the whole built-in library: top-1 for every
  built-in phase alone, and both phases of two-phase films (Co-Cr coating phases and others); pairs
  of one structure type less than 1 % apart are reported on their own line.
"""

from __future__ import annotations

import numpy as np

from saed.bench import Case

#: Phases of the two-phase films (the Co-Cr coating scenario first). Lattices of one structure type
#: less than 1 % apart are in LOOKALIKE_PAIRS instead: their rings do not split at this resolution.
MIXTURE_PAIRS = (("Co-fcc", "Co-hcp"), ("Co-hcp", "Cr"), ("Co-fcc", "Cr"), ("Ni", "Cr"), ("Fe-bcc", "Fe-fcc"),
                 ("Al", "Al2O3"), ("Ti-hcp", "TiN"), ("Ni", "NiAl"), ("Cu", "Au"), ("Si", "Au"),
                 ("Co-fcc", "Al2O3"), ("Ni3Al", "Ni"), ("TiO2-rutile", "Ti-hcp"), ("MgO", "Mg"),
                 ("Si", "Ge"), ("CeO2", "Ni"), ("Co-hcp", "TiN"), ("Zr-hcp", "Cu"), ("NiO", "Ni"), ("Al", "Si"))
#: Same structure, lattice parameters 0.6-0.9 % apart (ring splitting below the ring width).
LOOKALIKE_PAIRS = (("Fe-bcc", "Cr"), ("W", "Mo"), ("Pt", "Pd"))
SHAPE = (1024, 1024)
#: Detector of the identification cases (smaller, to keep the benchmark short; scales still put the
#: rings out to 12-20 1/nm).
ID_SHAPE = (768, 768)


def _session(rng):
    """Imaging conditions of one session: scale, ellipse."""
    from saed.calibration import Ellipse

    return float(rng.uniform(0.02, 0.045)), Ellipse(float(1 + rng.uniform(0.005, 0.02)), float(rng.uniform(0, 180)))


def _pattern(names, scale, ellipse, rng, fractions=None, shape=SHAPE):
    from saed.crystal import builtin_phase
    from saed.synth.rings import ring_pattern

    return ring_pattern([builtin_phase(n) for n in names], fractions=fractions, shape_px=shape,
                        scale_inv_nm_per_px=scale, ellipse=ellipse, graininess=float(rng.uniform(0, 0.5)),
                        peak_counts=float(rng.uniform(200, 800)), background_counts=float(rng.uniform(1000, 4000)),
                        rng=rng)


def _calibrate(scale, ellipse, rng, shape=SHAPE):
    from saed.calibrate.rings import calibrate_from_rings
    from saed.crystal import builtin_phase

    std = "Au" if rng.random() < 0.5 else "Al"
    pat = _pattern([std], scale, ellipse, rng, shape=shape)
    return calibrate_from_rings(pat.image, builtin_phase(std)).calibration


def _measure_with(cal, pat):
    from saed.rings.match import ObservedRings
    from saed.rings.measure import measure_rings

    m = measure_rings(pat.image, ellipse=cal.ellipse)
    return m, ObservedRings.from_measurement(m)


def _accuracy_calibration(n: int = 16, seed: int = 2024) -> dict:
    """Calibrate n standards; then measure d-spacings of another specimen of the same session."""
    rng = np.random.default_rng(seed)
    scale_err, q_err, d_err, d_err_blend = [], [], [], []
    for _ in range(n):
        scale, ell = _session(rng)
        cal = _calibrate(scale, ell, rng)
        scale_err.append(abs(cal.scale_inv_nm_per_px / scale - 1))
        q_err.append(abs(cal.ellipse.axis_ratio - ell.axis_ratio))
        spec = str(rng.choice(["Co-hcp", "Cr", "Ni", "Si", "TiN", "Al2O3"]))
        pat = _pattern([spec], scale, ell, rng)
        m, _ = _measure_with(cal, pat)
        true_r = np.array(pat.truth.ring_g_inv_nm[0]) / scale
        peaks = np.array(pat.truth.ring_peak_counts[0])
        sigma = pat.truth.ring_sigma_px
        d = 1.0 / (m.rings.radius_px * cal.scale_inv_nm_per_px)
        for i in np.nonzero(m.rings.snr >= 10)[0]:  # rings a microscopist would read off
            r = m.rings.radius_px[i]
            k = int(np.argmin(np.abs(true_r - r)))
            others = np.abs(true_r - true_r[k]) < 3 * sigma
            others[k] = False
            if others.any() and peaks[others].max() > 0.05 * peaks[k]:
                # an unresolved blend: its truth is the peak-weighted centroid of the lines under it
                under = np.abs(true_r - r) < 2.5 * sigma
                r_true = float((peaks[under] * true_r[under]).sum() / peaks[under].sum()) if under.any() else true_r[k]
                d_err_blend.append(abs(1.0 / (r_true * scale) / d[i] - 1))
            else:
                d_err.append(abs(1.0 / (true_r[k] * scale) / d[i] - 1))
    se, qe, de, db = np.array(scale_err), np.array(q_err), np.array(d_err), np.array(d_err_blend)
    return {"standards": n, "scale error median %": round(100 * float(np.median(se)), 4),
            "scale error max %": round(100 * float(se.max()), 4),
            "scale within 0.1 %": f"{int((se <= 1e-3).sum())}/{n}",
            "axis ratio error median": round(float(np.median(qe)), 5), "axis ratio error max": round(float(qe.max()), 5),
            "axis ratio within 0.002": f"{int((qe <= 0.002).sum())}/{n}",
            "resolved rings measured after calibration": len(de),
            "d error median %": round(100 * float(np.median(de)), 4),
            "d error 95th percentile %": round(100 * float(np.percentile(de, 95)), 4),
            "d within 0.2 %": f"{int((de <= 2e-3).sum())}/{len(de)}",
            "blended rings (vs the centroid of their lines) within 0.2 %": f"{int((db <= 2e-3).sum())}/{len(db)}"}


def _identify_case(names, k: int, seed: int, library, fractions=None):
    """One specimen of its own session (seeded by its number): the top solution's phase names."""
    from saed.rings.identify import identify_phases

    rng = np.random.default_rng([seed, k])
    scale, ell = _session(rng)
    cal = _calibrate(scale, ell, rng, shape=ID_SHAPE)
    pat = _pattern(list(names), scale, ell, rng, fractions=fractions, shape=ID_SHAPE)
    _, obs = _measure_with(cal, pat)
    ident = identify_phases(obs, library, scale_inv_nm_per_px=cal.scale_inv_nm_per_px, top=2)
    return sorted(p.name for p in ident.solutions[0].phases) if ident.solutions else []


def _accuracy_identification(seed: int = 7) -> dict:
    """Top-1 identification of every built-in phase alone and of the two-phase films, calibrated."""
    from saed.crystal import builtin_names, builtin_phase

    library = [builtin_phase(n) for n in builtin_names()]
    single_ok, single_wrong = 0, []
    for k, name in enumerate(builtin_names()):
        got = _identify_case([name], k, seed, library)
        if got == [name]:
            single_ok += 1
        else:
            single_wrong.append(f"{name}->{'+'.join(got)}")
    mix_ok, mix_wrong = 0, []
    for k, pair in enumerate(MIXTURE_PAIRS):
        fr = [1.0, float(np.random.default_rng([seed, 1000 + k]).uniform(0.4, 1.0))]
        got = _identify_case(pair, 1000 + k, seed, library, fractions=fr)
        if got == sorted(pair):
            mix_ok += 1
        else:
            mix_wrong.append(f"{'+'.join(pair)}->{'+'.join(got)}")
    look_ok, look_got = 0, []
    for k, pair in enumerate(LOOKALIKE_PAIRS):
        got = _identify_case(pair, 2000 + k, seed, library, fractions=[1.0, 0.8])
        look_ok += got == sorted(pair)
        look_got.append(f"{'+'.join(pair)}->{'+'.join(got)}")
    n1, n2 = len(builtin_names()), len(MIXTURE_PAIRS)
    return {"single phase top-1": f"{single_ok}/{n1} ({100 * single_ok / n1:.0f} %)",
            "single phase misses": ", ".join(single_wrong) or "none",
            "two-phase both found top-1": f"{mix_ok}/{n2} ({100 * mix_ok / n2:.0f} %)",
            "two-phase misses": ", ".join(mix_wrong) or "none",
            "look-alike pairs (same structure, <1 % apart) found as mixtures":
                f"{look_ok}/{len(LOOKALIKE_PAIRS)}: {', '.join(look_got)}"}


def _timing_setup():
    from saed.crystal import builtin_names, builtin_phase

    rng = np.random.default_rng(5)
    scale, ell = _session(rng)
    std = _pattern(["Au"], scale, ell, rng)
    spec = _pattern(["Co-fcc", "Co-hcp"], scale, ell, rng, fractions=[1.0, 0.7])
    library = [builtin_phase(n) for n in builtin_names()]
    return std, spec, library


def _calibrate_fn(state):
    from saed.calibrate.rings import calibrate_from_rings
    from saed.crystal import builtin_phase

    std, _, _ = state
    calibrate_from_rings(std.image, builtin_phase("Au"))


def _identify_fn(state):
    from saed.rings.identify import identify_phases
    from saed.rings.match import ObservedRings
    from saed.rings.measure import measure_rings

    std, spec, library = state
    m = measure_rings(spec.image, ellipse=std.truth.ellipse)
    obs = ObservedRings.from_measurement(m)
    identify_phases(obs, library, scale_inv_nm_per_px=std.truth.scale_inv_nm_per_px)


def cases():
    return [
        Case("rings: calibrate from an Au film, 1024x1024", _timing_setup, _calibrate_fn, repeat=5),
        Case("rings: measure + identify vs 45 phases and pairs, 1024x1024", _timing_setup, _identify_fn, repeat=3),
        Case("rings accuracy: standards and d-spacings (16 sessions)", lambda: None,
             lambda _: _accuracy_calibration(), repeat=1, warmup=0, note="accuracy, printed below"),
        Case("rings accuracy: phase identification (45 phases, 23 pairs)", lambda: None,
             lambda _: _accuracy_identification(), repeat=1, warmup=0, note="accuracy, printed below"),
    ]
