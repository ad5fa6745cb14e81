"""The charge-separated-state stage: each site's IP and EA, ion-pair energies of donor → acceptor
pairs, the branch comparison of each step, and the gap check per pigment type.

Per site (:func:`ions_stage`): neutral, cation and anion SCFs (:func:`siteshift.qm.ions.ionize`)
with the site's settings: its ε_static as an equilibrium continuum and, when electrostatics is
enabled, its embedding charges (the same ones as the embedded site calculation); cached by a hash
of every input beside the excited-state results (``{hash}.ions.json``).
Per pigment type (:func:`gap_stage`): the gap check on its first copy in the reference variant,
continuum only, at the configured ε points and the site's own, screened and unscreened.
Per study (:func:`ion_tables`): the site, pair, branch and gap tables and their plots.
"""
from __future__ import annotations

import logging
from pathlib import Path

import numpy as np
import pandas as pd

from ..base import io
from ..base.defaults import fill
from ..interactions.ionpairs import coulomb_eps, ion_pair, mirror, same_branch_pairs
from ..qm.ions import ionize, unscreened
from ..qm.warmstart import describe_start
from .stages import _hash_lock, density_path, qm_key, site_settings, site_start

log = logging.getLogger("siteshift")

SITE_COLUMNS = ["variant", "pigment_id", "ccd_code", "mode", "eps_static", "long_range_fraction",
                "ip_deltascf_ev", "ip_orbital_ev", "ip_orbital_minus_deltascf_ev",
                "ea_deltascf_ev", "ea_orbital_ev", "ea_orbital_minus_deltascf_ev",
                "gap_deltascf_ev", "gap_orbital_ev", "gap_orbital_minus_deltascf_ev",
                "s2_cation", "s2_anion", "scf_s_neutral", "scf_s_cation", "scf_s_anion",
                "cycles_neutral", "cycles_cation", "cycles_anion", "start_neutral", "qm_hash"]


def cached_ionize(rec: dict, settings, cache_dir=None, charges=None, functional=None,
                  label=None, start=None, starts=None) -> tuple[dict, str]:
    """(result, hash) of one site's ion calculation, computed or reused from the cache.

    start: a callable giving (dm0, record) of the neutral's SCF start
    (:func:`siteshift.study.stages.site_start`); starts: starting densities of the ions
    ({"cation": dm, "anion": dm}, e.g. :func:`ion_densities` of a neighbouring point). Neither
    is part of the cache key. The converged densities of the three states are kept beside
    the result (:func:`ion_densities`)."""
    label = label or rec["pigment_id"]
    functional = functional or settings.functional
    key = qm_key(rec, settings, charges)
    key.update(kind="ions", functional=functional.as_dict())
    h = io.stable_hash(key)
    cached = Path(cache_dir) / f"{h}.ions.json" if cache_dir else None
    with _hash_lock(cached):
        if cached is not None and cached.exists():
            log.info("%s: ion inputs unchanged (hash %s); reusing %s", label, h, cached)
            out = io.read_json(cached)
            out["cache"] = "reused"
            return out, h
        dm0, how = start() if start is not None else (None, None)
        log.info("%s: cation and anion, eps_static=%.3f, alpha+beta=%.4f, omega=%.4f%s "
                 "(hash %s); neutral starts %s", label, settings.eps_static,
                 functional.long_range_fraction, functional.omega,
                 "" if charges is None else f", {len(charges)} charges", h,
                 f"warm from {how['source']}" if how and how["kind"] == "warm" else "cold")
        out = ionize(rec["elements"], rec["coords_A"], rec["charge"], rec["multiplicity"] - 1,
                     settings, functional=functional, charges=charges,
                     log=lambda m: log.info("%s %s", label, m), dm0=dm0, start=how,
                     starts=starts)
        out.pop("_dm", None)
        dms = out.pop("_dms", {})
        out["cache"] = "computed"
        if cached is not None:
            cached.parent.mkdir(parents=True, exist_ok=True)
            with io.atomic_target(ion_density_path(cached), suffix=".npz") as tmp:
                np.savez(tmp, **{k: np.asarray(v) for k, v in dms.items()})
            io.write_json(cached, out)   # last: the entry counts once its JSON exists
    return out, h


def ion_density_path(cached_json):
    """Where the converged densities of a cached ion result are kept (.npz)."""
    return Path(str(cached_json).removesuffix(".ions.json") + ".ions.dms.npz")


def ion_densities(cache_dir, h) -> dict | None:
    """{"neutral", "cation", "anion": AO density} of a cached ion result, or None."""
    if not cache_dir:
        return None
    path = ion_density_path(Path(cache_dir) / f"{h}.ions.json")
    if not path.exists():
        return None
    with np.load(path) as z:
        return {k: z[k] for k in z.files}


def _chain(rec, settings, tuning_json, previous):
    """The start of the next point of a scan over one geometry: the previous point's densities
    (neutral and ions) when it left them, else the tuning orbitals."""
    if previous:
        return (lambda: (previous["neutral"], {"kind": "warm", "source": "the previous point"}),
                {k: v for k, v in previous.items() if k != "neutral"})
    return site_start(rec, settings, tuning_json), None


def ions_stage(model_json, environment_json, out_json, qm: dict, tuning_json=None,
               cache_dir=None, variant=None, charges_tsv=None, el=None):
    """IP, EA and the fitted hole/electron charges of one site (embedded when charges_tsv is
    given, with the electrostatics settings el)."""
    rec = io.read_json(model_json)
    diel = io.read_json(environment_json)["dielectric"]
    settings = site_settings(rec, diel, qm, tuning_json)
    pc, mode = None, "continuum"
    if charges_tsv:
        from .electrostatics import site_point_charges
        el = fill(el, "electrostatics")
        if el["cavity"] == "optical":
            settings.eps_static = settings.eps_optical
        charges = pd.read_csv(charges_tsv, sep="\t", keep_default_na=False)
        pc, _notes = site_point_charges(charges, rec, el, diel)
        mode = "embedded"
    # the neutral is the site's ground state (same ε, functional and charges): start from the
    # site calculation's density when it is already in the cache, else from the tuning orbitals
    site_h = io.stable_hash(qm_key(rec, settings, pc))
    out, h = cached_ionize(rec, settings, cache_dir, charges=pc, start=site_start(
        rec, settings, tuning_json,
        density=density_path(Path(cache_dir) / f"{site_h}.json") if cache_dir else None,
        source=f"the site's {mode} ground state ({site_h})"))
    out.update(pigment_id=rec["pigment_id"], ccd_code=rec["ccd_code"], variant=variant,
               mode=mode, qm_hash=h, coords_A=rec["coords_A"],
               dielectric={"eps_static": diel["eps_static"],
                           "eps_optical": diel["eps_optical"], "source": diel["source"]})
    io.write_json(out_json, out)
    return out


def gap_stage(model_json, environment_json, out_json, qm: dict, eps_points=(1.0,),
              tuning_json=None, cache_dir=None):
    """The gap check of one pigment type: orbital gap and ΔSCF IP − EA at each ε (the points
    and the site's own ε_static), screened (α + β = 1/ε) and unscreened (α + β = 1); at ε = 1
    the two are the same functional and computed once."""
    rec = io.read_json(model_json)
    diel = io.read_json(environment_json)["dielectric"]
    site_eps = float(diel["eps_static"])
    points = sorted({float(e) for e in eps_points} | {site_eps})
    rows, previous = [], None
    for k, eps in enumerate(points):
        settings = site_settings(rec, {**diel, "eps_static": eps,
                                       "eps_optical": min(float(diel["eps_optical"]), eps)},
                                 qm, tuning_json)
        kinds = [("screened", settings.functional)]
        if settings.functional.long_range_fraction < 1.0:
            kinds.append(("unscreened", unscreened(settings)))
        for kind, fn in kinds:
            log.info("gap check %s point %d/%d: eps_static %.2f, %s", rec["ccd_code"], k + 1,
                     len(points), eps, kind)
            start, starts = _chain(rec, settings, tuning_json, previous)
            res, h = cached_ionize(rec, settings, cache_dir, functional=fn,
                                   label=f"{rec['pigment_id']} gap check", start=start,
                                   starts=starts)
            previous = ion_densities(cache_dir, h)
            row = {"ccd_code": rec["ccd_code"], "pigment_id": rec["pigment_id"],
                   "eps_static": eps, "site_eps": abs(eps - site_eps) < 1e-12,
                   "functional": kind, "long_range_fraction": fn.long_range_fraction,
                   "omega_bohr_inv": fn.omega, "qm_hash": h,
                   "scf_cycles": sum(v["cycles"] for v in res["scf"].values()),
                   "start_neutral": describe_start(res["scf"]["neutral"].get("start"))}
            row.update({key: res[key] for key in (
                "ip_deltascf_ev", "ip_orbital_ev", "ea_deltascf_ev", "ea_orbital_ev",
                "gap_deltascf_ev", "gap_orbital_ev", "gap_orbital_minus_deltascf_ev")})
            if kind == "screened" and fn.long_range_fraction == 1.0:
                rows.append({**row, "functional": "unscreened"})
            rows.append(row)
    out = {"ccd_code": rec["ccd_code"], "pigment_id": rec["pigment_id"], "site_eps": site_eps,
           "rows": rows}
    io.write_json(out_json, out)
    return out


def ion_sweep_stage(model_json, out_json, qm: dict, eps_grid, n2=2.0, tuning_json=None,
                    cache_dir=None, variant=None):
    """One site's IP and EA (continuum only) over the ε-sweep grid (ε_optical = min(n², ε)),
    with the hole and electron charges of each point for the ion pairs of the sweep table."""
    rec = io.read_json(model_json)
    points, omega = [], None
    grid = sorted(float(e) for e in eps_grid)
    previous = None
    for k, eps in enumerate(grid):
        log.info("%s ion sweep point %d/%d: eps_static %.2f", rec["pigment_id"], k + 1,
                 len(grid), eps)
        settings = site_settings(rec, {"eps_static": eps, "eps_optical": min(float(n2), eps)},
                                 qm, tuning_json)
        omega = settings.omega
        start, starts = _chain(rec, settings, tuning_json, previous)
        res, h = cached_ionize(rec, settings, cache_dir, start=start, starts=starts,
                               label=f"{rec['pigment_id']} at eps {eps:g}")
        previous = ion_densities(cache_dir, h)
        points.append({"eps_static": eps, "eps_optical": settings.eps_optical, "qm_hash": h,
                       **{key: res[key] for key in (
                           "ip_deltascf_ev", "ea_deltascf_ev", "ip_orbital_ev", "ea_orbital_ev",
                           "hole_charges", "electron_charges")}})
    out = {"variant": variant, "pigment_id": rec["pigment_id"], "ccd_code": rec["ccd_code"],
           "ions": True, "omega_bohr_inv": omega, "coords_A": rec["coords_A"], "points": points}
    io.write_json(out_json, out)
    return out


def ion_sweep_rows(sweeps: list, ion_pairs=()) -> list:
    """Rows in the ε-sweep table's shape: IP and EA (ΔSCF) per pigment and ε, and the ion
    pair E(D⁺A⁻) = IP_D − EA_A + V/ε of each configured [name, donor, acceptor] at each ε
    both were swept at (pigment_id the pair's name, band 'ion_pair')."""
    rows, by = [], {}
    for sw in sweeps:
        by[(sw["variant"], sw["pigment_id"])] = sw
        for pt in sw["points"]:
            for band, key in (("IP", "ip_deltascf_ev"), ("EA", "ea_deltascf_ev")):
                rows.append({"variant": sw["variant"], "pigment_id": sw["pigment_id"],
                             "ccd_code": sw["ccd_code"], "eps_static": pt["eps_static"],
                             "eps_optical": pt["eps_optical"], "band": band,
                             "energy_ev": pt[key], "omega_bohr_inv": sw["omega_bohr_inv"]})
    for variant in sorted({v for v, _p in by}, key=str):
        for name, d, a in ion_pairs:
            if (variant, d) not in by or (variant, a) not in by:
                continue
            D, A = by[(variant, d)], by[(variant, a)]
            pa = {p["eps_static"]: p for p in A["points"]}
            for pd_ in D["points"]:
                pa_ = pa.get(pd_["eps_static"])
                if pa_ is None:
                    continue
                r = ion_pair(pd_, pa_, D["coords_A"], A["coords_A"], pd_["eps_static"])
                rows.append({"variant": variant, "pigment_id": name, "ccd_code": "ion_pair",
                             "eps_static": pd_["eps_static"], "eps_optical": pd_["eps_optical"],
                             "band": "ion_pair", "energy_ev": r["energy_ev"],
                             "omega_bohr_inv": D["omega_bohr_inv"]})
    return rows


def site_rows(ion_files) -> pd.DataFrame:
    rows = []
    for p in ion_files:
        d = io.read_json(p)
        scf = d["scf"]
        rows.append({
            "variant": d["variant"], "pigment_id": d["pigment_id"], "ccd_code": d["ccd_code"],
            "mode": d["mode"], "eps_static": d["eps_static"],
            "long_range_fraction": 1.0 / d["functional"]["eps_screen"],
            **{k: d[k] for k in SITE_COLUMNS if k in d and k not in ("variant", "mode",
                                                                     "eps_static")},
            "s2_cation": scf["cation"]["s_squared"], "s2_anion": scf["anion"]["s_squared"],
            **{f"scf_s_{k}": scf[k]["time_s"] for k in scf},
            **{f"cycles_{k}": scf[k]["cycles"] for k in scf},
            "start_neutral": describe_start(scf["neutral"].get("start"))})
    return pd.DataFrame(rows, columns=SITE_COLUMNS)


def _lowest_excitation(site: dict | None) -> float | None:
    if not site:
        return None
    return float(min(s["energy_ev"] for s in site["states"]))


def _dimer_ct(dimers, variant, donor, acceptor) -> dict:
    """The lowest state of a configured dimer (results read) of donor and acceptor whose
    transition density is mostly donor → acceptor charge transfer (Ω share > 0.5), or {}."""
    for d in dimers:
        if d.get("variant") != variant or set(d.get("pigments", ())) != {donor, acceptor}:
            continue
        key = "ct_a_to_b" if d["pigments"][0] == donor else "ct_b_to_a"
        ct = [s for s in d["states"] if s[key] > 0.5]
        if ct:
            s = min(ct, key=lambda s: s["energy_ev"])
            return {"dimer_ct_ev": s["energy_ev"], "dimer_ct_share": s[key],
                    "dimer_ct_state": s["state"]}
        return {"dimer_ct_ev": None, "dimer_ct_share": None,
                "dimer_ct_state": f"none of {len(d['states'])} states"}
    return {}


def pair_list(cfg: dict, variant_ions: dict, branch_pairs) -> list:
    """(name, donor, acceptor, source) of a variant: the configured pairs it has both pigments
    of, and the automatic same-branch ones (ions.auto_distance_A)."""
    out = []
    for n, d, a in cfg["pairs"]:
        missing = [p for p in (d, a) if p not in variant_ions]
        if missing:
            log.warning("ion pair %s: %s not computed in this variant (failed, absent, or not "
                        "selected by pigment_codes); the pair is left out", n, ", ".join(missing))
            continue
        out.append((n, d, a, "configured"))
    if cfg["auto_distance_A"] > 0:
        sides = {a: "A" for _n, a, _b in branch_pairs}
        sides.update({b: "B" for _n, _a, b in branch_pairs})
        coords = {p: np.asarray(r["coords_A"]) for p, r in variant_ions.items()}
        seen = {(d, a) for _n, d, a, _s in out}
        out += [(n, d, a, "auto") for n, d, a in
                same_branch_pairs(coords, sides, cfg["auto_distance_A"]) if (d, a) not in seen]
    return out


def pair_rows(ion_files, site_files=(), dimer_files=(), cfg=None, branch_pairs=()) -> list:
    """One row per ion pair and variant (energies in eV, distances in Å)."""
    cfg = fill(cfg, "ions")
    by_variant: dict = {}
    for p in ion_files:
        d = io.read_json(p)
        by_variant.setdefault(d["variant"], {})[d["pigment_id"]] = d
    sites = {}
    for p in site_files:
        d = io.read_json(p)
        key = (d.get("variant"), d["pigment_id"])
        if d.get("mode") == "embedded" or key not in sites:
            sites[key] = d
    dimers = [io.read_json(p) for p in dimer_files]
    rows = []
    for variant, ions in sorted(by_variant.items(), key=lambda kv: str(kv[0])):
        for name, donor, acceptor, source in pair_list(cfg, ions, branch_pairs):
            D, A = ions[donor], ions[acceptor]
            eps_c = coulomb_eps(cfg["coulomb_eps"], D["dielectric"], A["dielectric"])
            r = ion_pair(D, A, D["coords_A"], A["coords_A"], eps_c,
                         _lowest_excitation(sites.get((variant, donor))))
            rows.append({"variant": variant, "pair": name, "donor": donor,
                         "acceptor": acceptor, "source": source, "mode": D["mode"],
                         "coulomb_eps_choice": str(cfg["coulomb_eps"]), **r,
                         **_dimer_ct(dimers, variant, donor, acceptor)})
    return rows


def branch_rows(pairs: pd.DataFrame, branch_pairs) -> pd.DataFrame:
    """Each ion-pair step beside its mirror on the other branch (the branch partners of its
    donor and acceptor): energies, driving forces and their difference (a − b, eV)."""
    partner = {a: b for _n, a, b in branch_pairs}
    partner.update({b: a for _n, a, b in branch_pairs})
    side_a = {a for _n, a, _b in branch_pairs}
    rows = []
    if pairs.empty:
        return pd.DataFrame(rows)
    for variant, g in pairs.groupby("variant", sort=True):
        idx = {(r.donor, r.acceptor): r for r in g.itertuples()}
        for r in g.itertuples():
            m = mirror(r.donor, r.acceptor, partner)
            if r.donor not in side_a or m is None or m not in idx:
                continue
            o = idx[m]
            rows.append({"variant": variant, "step_a": r.pair, "step_b": o.pair,
                         "donor_a": r.donor, "acceptor_a": r.acceptor, "donor_b": o.donor,
                         "acceptor_b": o.acceptor, "energy_a_ev": r.energy_ev,
                         "energy_b_ev": o.energy_ev, "delta_ev": r.energy_ev - o.energy_ev,
                         "driving_force_a_ev": r.driving_force_ev,
                         "driving_force_b_ev": o.driving_force_ev,
                         "eps_coulomb_a": r.eps_coulomb, "eps_coulomb_b": o.eps_coulomb,
                         "lower": "a" if r.energy_ev < o.energy_ev else "b"})
    return pd.DataFrame(rows)


def gap_rows(gap_files) -> pd.DataFrame:
    rows = []
    for p in gap_files:
        rows += io.read_json(p)["rows"]
    return pd.DataFrame(rows)


def ion_tables(ion_files, out_sites, out_pairs, out_branches, out_gaps, gap_files=(),
               site_files=(), dimer_files=(), cfg=None, branch_pairs=()):
    """Write the four tables; return them as DataFrames."""
    sites = site_rows(ion_files)
    pairs = pd.DataFrame(pair_rows(ion_files, site_files, dimer_files, cfg, branch_pairs))
    branches = branch_rows(pairs, branch_pairs)
    gaps = gap_rows(gap_files)
    for path, df in ((out_sites, sites), (out_pairs, pairs), (out_branches, branches),
                     (out_gaps, gaps)):
        io.write_tsv(path, df)
    log.info("ions: %d sites, %d ion pairs, %d branch steps, %d gap rows", len(sites),
             len(pairs), len(branches), len(gaps))
    for r in branches.itertuples():
        log.info("%s: %s %.3f eV vs %s %.3f eV (a - b %+.3f eV)", r.variant, r.step_a,
                 r.energy_a_ev, r.step_b, r.energy_b_ev, r.delta_ev)
    return sites, pairs, branches, gaps
