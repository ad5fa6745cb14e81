"""ε sweeps: one pigment's excited states over a grid of uniform ε_static, each point's SCF
started warm from the densities already computed."""
from __future__ import annotations

import logging
import time
from pathlib import Path

import numpy as np

from ..base import io
from ..qm.excite import excite
from .stages import density_path, study_omega

log = logging.getLogger("siteshift")


def sweep_anchor(excite_json, cache_dir, qm: dict):
    """(1/ε, density) of the pigment's own excited-state calculation, a point on the sweep's
    curve when that calculation used the same functional family (static screening, so the
    ground state depends on ε_static alone), or None (not cached, or screened by ε_optical)."""
    if not excite_json or not cache_dir or qm.get("screen", "static") != "static":
        return None
    res = io.read_json(excite_json)
    path = density_path(Path(cache_dir) / f"{res.get('qm_hash')}.json")
    if not path.exists():
        return None
    return 1.0 / float(res["eps_static"]), np.load(path)


def sweep_guess(dms, xs, eps, extrapolate=True):
    """(kind, density) to start the SCF at ε from earlier points' densities dms at xs = 1/ε.

    The straight line in 1/ε through the two computed points nearest to 1/ε (interpolation when
    they lie on both sides, else extrapolation); the nearest density alone when only one point,
    or only one distinct ε, is there."""
    if not dms:
        return "default", None
    x = 1.0 / eps
    order = sorted(range(len(xs)), key=lambda k: (abs(xs[k] - x), -k))
    i = order[0]
    j = next((k for k in order[1:] if abs(xs[k] - xs[i]) > 1e-9), None)
    if not extrapolate or j is None:
        return "previous", dms[i]
    f = (x - xs[i]) / (xs[i] - xs[j])
    return "extrapolated", dms[i] + f * (dms[i] - dms[j])


def sweep_order(eps_grid, x_anchor=None):
    """The sweep's ε in the order they are computed: ascending (the sweep stage), or, with an
    anchor at 1/ε = x_anchor, nearest to the anchor first in 1/ε (the benchmark's 'outward')."""
    grid = sorted(float(e) for e in eps_grid)
    if x_anchor is None:
        return grid
    return sorted(grid, key=lambda e: (abs(1.0 / e - x_anchor), e))


def sweep_stage(model_json, out_json, qm: dict, eps_grid, n2=2.0, tuning_json=None,
                variant=None, measure_cold_start=False, anchor=None):
    """Excited states of one pigment over a grid of ε_static (uniform: SRSH screening and PCM
    together; ε_optical = min(n², ε_static)). Each point's SCF starts warm (:func:`sweep_guess`):
    from the line through the two computed densities nearest in 1/ε, the variable in which both
    the SRSH long-range fraction (1/ε) and the PCM screening factor (1 − 1/ε) are linear, or from
    the one computed density while there is one. measure_cold_start: also converge the second point
    from the default guess (one extra SCF) and record its cycles, to show what the warm start
    saves. anchor: (1/ε, density) of the pigment's site calculation (:func:`sweep_anchor`),
    which then serves as the point before the first, so every point starts warm. (Computing the
    points nearest to the anchor first, :func:`sweep_order`, was measured against ascending ε:
    HC4/6-31G, ε 2/4/8/16, site 8.33: 5/5/6/7 SCF cycles against 8/6/3/5. Starting each
    response from the previous point's amplitudes was measured and is not done: HC4/6-31G took
    12/8/8 products of 34/30/28 vectors against 8/7/7 of 32/31/31 from the default guess.)"""
    from ..qm.scf import build_molecule, make_scf, run_scf
    from .config import qm_settings
    rec = io.read_json(model_json)
    omega = study_omega(qm, tuning_json)
    points, dms, xs = [], [], []
    if anchor is not None:
        xs.append(float(anchor[0]))
        dms.append(np.asarray(anchor[1]))
        log.info("%s: sweep anchored on the site calculation at eps=%.3f", rec["pigment_id"],
                 1.0 / xs[0])
    t0 = time.perf_counter()
    for k, eps in enumerate(sweep_order(eps_grid)):
        s = qm_settings(qm, eps, min(n2, eps), omega, rec.get("nstates_default"))
        t = time.perf_counter()
        guess, dm = sweep_guess(dms, xs, eps)
        res = excite(rec["elements"], rec["coords_A"], rec["charge"], rec["multiplicity"] - 1,
                     s, log=None, dm0=dm, band_axes=rec["band_axes"] or None,
                     band_scheme=rec.get("band_scheme"),
                     keep_density=True)
        cold = None
        if k == 1 and measure_cold_start:
            mol = build_molecule(rec["elements"], rec["coords_A"], rec["charge"],
                                 rec["multiplicity"] - 1, s.basis, s.max_memory_mb)
            cold = run_scf(make_scf(mol, s))[2]
        dms.append(np.asarray(res.pop("_dm")))
        xs.append(1.0 / eps)
        points.append({"eps_static": eps, "eps_optical": min(n2, eps),
                       "scf_cycles": res["scf_cycles"], "scf_cycles_cold": cold,
                       "warm_start": guess != "default", "scf_guess": guess,
                       "response_products": res["response"]["products"],
                       "time_s": round(time.perf_counter() - t, 2),
                       "states": res["states"]})
        log.info("%s eps=%.2f: %s (SCF %d cycles%s)", rec["pigment_id"], eps,
                 ", ".join(f"{st['energy_ev']:.4f}" for st in res["states"]),
                 res["scf_cycles"], "" if cold is None else f"; cold start {cold}")
    for k, pt in enumerate(points):
        pt["computed_as"] = k + 1  # the order of the warm starts; the table is by ε
    points.sort(key=lambda pt: pt["eps_static"])
    out = {"pigment_id": rec["pigment_id"], "ccd_code": rec["ccd_code"], "variant": variant,
           "omega_bohr_inv": omega, "n2": n2, "points": points,
           "time_s": round(time.perf_counter() - t0, 2)}
    io.write_json(out_json, out)
    return out
