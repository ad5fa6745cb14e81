"""Commands on pairs of sites and on a site's ions: `siteshift couple` (excitonic couplings,
optionally the dimer computed whole) and `siteshift ions` (IP, EA and the gap, ΔSCF and frontier
orbitals, screened and unscreened)."""
from __future__ import annotations

import sys
from pathlib import Path

import numpy as np


def cmd_couple(args):
    """Couplings of two sites' transitions by the three routes (and the dimer computed whole)."""
    from ..base.io import read_json, write_json
    from ..interactions.couplings import couple
    from ..study.config import qm_settings
    from ..study.couplings import cached_transitions, measured_dipole_strength, pick_state
    from ..study.stages import cached_excite, setup_logging
    from pathlib import Path
    if args.verbose:
        setup_logging()
    qm = {"preset": args.preset, "omega": args.omega}
    cache = Path(args.cache)
    sites, results, recs = [], [], []
    for path in (args.model_a, args.model_b):
        rec = read_json(path)
        s = qm_settings(qm, args.eps_static, args.eps_optical, qm.get("omega"),
                        rec.get("nstates_default"))
        res, h, _arrays = cached_excite(rec, s, cache, label=rec["pigment_id"])
        res["qm_hash"] = h
        sites.append(cached_transitions(res, h, rec, cache))
        results.append(res)
        recs.append(rec)
    picks = []
    for res, want in zip(results, args.states or ["auto", "auto"]):
        picks.append(None if want == "all" else [pick_state(res["states"], want)["index"] - 1])
    scales = [1.0, 1.0]
    if all(p is not None for p in picks):
        from ..structures.library import load_library
        library = load_library(getattr(args, "library", None))
        for i, (st, res, p) in enumerate(zip(sites, results, picks)):
            band = next((x.get("band") for x in res["states"] if x["index"] == p[0] + 1), None)
            d2, why = measured_dipole_strength(st.ccd_code, band, args.dipole_strength, library)
            if d2 is not None:
                scales[i] = float(np.sqrt(d2) / np.linalg.norm(st.dipole_debye(p[0])))
                print(f"{st.pigment_id}: transition dipole rescaled x{scales[i]:.3f} to "
                      f"{d2:.1f} D^2 ({why})", file=sys.stderr)
    elif args.dipole_strength != "off":
        print("note: with --states all the computed transition dipoles are used (a measured "
              "dipole strength belongs to one band)", file=sys.stderr)
    rows = couple(sites[0], sites[1], picks[0], picks[1], screening=args.screening,
                  eps_optical=args.eps_optical, dipole_scale_a=scales[0],
                  dipole_scale_b=scales[1])
    print(f"{'state_a':>8s} {'state_b':>8s} {'R_A':>7s} {'kappa':>7s} {'mu_a_D':>7s} "
          f"{'mu_b_D':>7s} {'J_tdc':>9s} {'J_charges':>9s} {'J_dipole':>9s}  cm-1 "
          f"(screening {args.screening}, x{rows[0]['screening_factor']:.3f})")
    for r in rows:
        name = lambda k, b: f"{k}{'/' + b if b else ''}"  # noqa: E731
        print(f"{name(r['state_a'], r['band_a']):>8s} {name(r['state_b'], r['band_b']):>8s} "
              f"{r['distance_A']:7.2f} {r['kappa']:7.3f} {r['mu_a_debye']:7.2f} "
              f"{r['mu_b_debye']:7.2f} {r['j_tdc_cm1']:9.2f} {r['j_charges_cm1']:9.2f} "
              f"{r['j_dipole_cm1']:9.2f}")
    out = {"model_a": str(args.model_a), "model_b": str(args.model_b), "couplings": rows,
           "eps_static": args.eps_static, "eps_optical": args.eps_optical}
    if args.dimer:
        out["dimer"] = _dimer(args, recs, results, picks, rows, cache)
    if args.json:
        write_json(args.json, out)
    return 0


def _dimer(args, recs, results, picks, rows, cache):
    """The two sites in one supermolecular TDA, beside the coupling model's pair."""
    from ..base.units import EV2CM1
    from ..interactions.dimer import excite_dimer, model_pair
    from ..study.config import qm_settings
    from ..study.stages import load_response
    ka, kb = (p[0] if p else 0 for p in picks)
    resp = []
    for res, k in zip(results, (ka, kb)):
        arrays = load_response(cache / f"{res['qm_hash']}.json")
        resp.append({**arrays, "energies_ev": [s["energy_ev"] for s in
                                               sorted(res["states"], key=lambda s: s["index"])]})
    s = qm_settings({"preset": args.preset, "omega": args.omega}, args.eps_static,
                    args.eps_optical, args.omega)
    s.nstates = max(2 * len(results[0]["states"]), 4)
    log = (lambda m: print(m, file=sys.stderr)) if args.verbose else None
    site_a, site_b = ((r["elements"], r["coords_A"], r["charge"]) for r in recs)
    out, _res = excite_dimer(site_a, site_b, s, resp[0], resp[1], ka, kb, log=log)
    row = next(r for r in rows if r["state_a"] == ka + 1 and r["state_b"] == kb + 1)
    lo, up = model_pair(row["energy_a_ev"], row["energy_b_ev"], row["j_tdc_vacuum_cm1"])
    out["model_pair_ev"] = [lo, up]
    out["model_splitting_cm1"] = (up - lo) * EV2CM1
    print(f"dimer (one TDA, {s.nstates} states): pair S{out['pair'][0]}/S{out['pair'][1]} "
          f"split {out['splitting_cm1']:.1f} cm-1 (J {out['j_supermolecular_cm1']:+.1f}); "
          f"model (vacuum tdc J {row['j_tdc_vacuum_cm1']:+.1f}) {out['model_splitting_cm1']:.1f}"
          f" cm-1; charge transfer {out['charge_transfer_pair'][0]:.3f}/"
          f"{out['charge_transfer_pair'][1]:.3f}")
    return out



def cmd_ions(args):
    """One site's IP and EA (ΔSCF and frontier orbitals) in a uniform continuum."""
    from ..base.io import read_json, write_json
    from ..qm.ions import unscreened
    from ..study.config import qm_settings
    from ..study.ions import cached_ionize
    from ..study.stages import setup_logging
    if args.verbose:
        setup_logging()
    rec = read_json(args.model)
    eps_o = min(args.eps_optical, args.eps_static)
    s = qm_settings({"preset": args.preset, "omega": args.omega}, args.eps_static, eps_o,
                    args.omega)
    kinds = [("screened", s.functional)]
    if args.unscreened and s.functional.long_range_fraction < 1.0:
        kinds.append(("unscreened", unscreened(s)))
    out = {"model": str(args.model), "eps_static": args.eps_static, "results": {}}
    print(f"{rec['pigment_id']} ({rec['ccd_code']}), eps_static {args.eps_static:g}, omega "
          f"{s.omega:.4f} bohr^-1, {s.basis}; energies in eV")
    print(f"{'functional':>12s} {'a+b':>6s} {'IP_dSCF':>8s} {'-HOMO':>8s} {'EA_dSCF':>8s} "
          f"{'-LUMO':>8s} {'gap_dSCF':>9s} {'gap_orb':>8s} {'orb-dSCF':>9s}")
    for kind, fn in kinds:
        res, h = cached_ionize(rec, s, Path(args.cache), functional=fn)
        res["qm_hash"] = h
        out["results"][kind] = res
        print(f"{kind:>12s} {fn.long_range_fraction:6.3f} {res['ip_deltascf_ev']:8.4f} "
              f"{res['ip_orbital_ev']:8.4f} {res['ea_deltascf_ev']:8.4f} "
              f"{res['ea_orbital_ev']:8.4f} {res['gap_deltascf_ev']:9.4f} "
              f"{res['gap_orbital_ev']:8.4f} {res['gap_orbital_minus_deltascf_ev']:+9.4f}")
        t = res["scf"]
        print(f"{'':>12s} SCF s: neutral {t['neutral']['time_s']:.1f}, cation "
              f"{t['cation']['time_s']:.1f}, anion {t['anion']['time_s']:.1f}")
    if args.json:
        write_json(args.json, out)
    return 0


def _cache_and_json(p, what):
    p.add_argument("--cache", default="siteshift_cache",
                   help="folder keeping QM results between calls (default ./siteshift_cache)")
    p.add_argument("--json", help=f"write {what} as JSON")


def add_pair_commands(add):
    """Register `couple` and `ions` with the parser's ``add(name, help)``."""
    from ..base.defaults import FALLBACK_OMEGA, QM_PRESETS, default
    p = add("couple", "excitonic couplings of two sites by three routes (cm⁻¹)")
    p.add_argument("model_a", help="qm_model.json of the first site (from `extract`)")
    p.add_argument("model_b", help="qm_model.json of the second site")
    p.add_argument("--states", nargs=2, metavar=("A", "B"),
                   help="the coupled state of each: a band name, a state number, auto (Qy, "
                        "else bright, else the lowest) or all (default: auto auto)")
    p.add_argument("--preset", choices=sorted(QM_PRESETS), default=default("qm.preset"),
                   help=f"QM preset (default {default('qm.preset')})")
    p.add_argument("--omega", type=float, help="ω in bohr⁻¹ (default: the untuned "
                   f"{FALLBACK_OMEGA})")
    p.add_argument("--eps-static", type=float, default=default("dielectric.eps_uniform"),
                   help=f"continuum ε_static (default {default('dielectric.eps_uniform')})")
    p.add_argument("--eps-optical", type=float, default=default("dielectric.eps_optical"),
                   help=f"continuum ε_optical, also n² of the screening (default "
                        f"{default('dielectric.eps_optical')})")
    scr = default("couplings.screening.model")
    p.add_argument("--screening", choices=["optical", "distance", "none"], default=scr,
                   help=f"screening of the couplings (default {scr})")
    p.add_argument("--dipole-strength", choices=["library", "off"], default="library",
                   help="rescale each coupled band's transition density to the pigment "
                        "library's measured dipole strength where it has one (library, the "
                        "default) or keep the computed dipoles (off)")
    p.add_argument("--dimer", action="store_true",
                   help="also compute the two sites in one supermolecular TDA and compare")
    _cache_and_json(p, "the couplings (and dimer)")
    p.set_defaults(func=cmd_couple)
    p = add("ions", "a site's IP, EA and fundamental gap: ΔSCF ions and frontier orbitals (eV)")
    p.add_argument("model", help="qm_model.json of the site (from `extract`)")
    p.add_argument("--preset", choices=sorted(QM_PRESETS), default=default("qm.preset"),
                   help=f"QM preset (default {default('qm.preset')})")
    p.add_argument("--omega", type=float, help="ω in bohr⁻¹ (default: the untuned "
                   f"{FALLBACK_OMEGA})")
    p.add_argument("--eps-static", type=float, default=default("dielectric.eps_uniform"),
                   help="equilibrium continuum of the neutral and both ions, and the screening "
                        f"α + β = 1/ε (default {default('dielectric.eps_uniform')})")
    p.add_argument("--eps-optical", type=float, default=default("dielectric.eps_optical"),
                   help="ε_optical (sets the screening when qm.screen is optical; default "
                        f"{default('dielectric.eps_optical')})")
    p.add_argument("--unscreened", action="store_true",
                   help="also the same functional unscreened (α + β = 1), for comparison")
    _cache_and_json(p, "the ion results")
    p.set_defaults(func=cmd_ions)
