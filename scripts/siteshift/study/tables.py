"""Study tables: site energies, branch-to-branch shifts, variant-vs-reference shifts, the
environment table and the ε-sweep tables (pure functions, and the stages that write them)."""
from __future__ import annotations

import logging
from pathlib import Path

import numpy as np
import pandas as pd

from ..base import io
from ..base.defaults import default
from ..base.io import read_json
from ..base.units import EV2CM1, NM_EV
from ..qm.warmstart import describe_start
from ..structures.library import load_library
from ..structures.reading import read_structure

log = logging.getLogger("siteshift")

SITE_COLUMNS = ["variant", "mode", "pigment_id", "ccd_code", "chain", "band", "state_index", "energy_ev",
                "wavelength_nm", "oscillator_strength", "transition_dipole_debye",
                "eps_static", "eps_optical", "eps_screen", "alpha", "omega_bohr_inv", "basis",
                "response", "solvation", "scf_cycles", "scf_start", "geometry",
                "geometry_rmsd_A", "qm_hash"]


#: A target curve varying by less than this over the scanned ε is reported as flat: SCF runs
#: converged to the default tolerances from different starting densities give excitation
#: energies that differ by up to ~3e-5 eV (measured on the demo pigment's two mirror-image
#: copies, whose ε sweeps start from different site densities).
FLAT_EV = 1e-4

def site_rows(result: dict) -> list:
    """Rows of one pigment: every named band (Qy, Qx or bright) and the lowest state S1."""
    rows = []
    states = sorted(result["states"], key=lambda s: s["energy_ev"])
    picked = [(s["band"], s) for s in states if s.get("band")]
    picked.append(("S1", states[0]))
    f = result["functional"]
    for band, s in picked:
        rows.append({
            "variant": result.get("variant"), "mode": result.get("mode", "continuum"),
            "pigment_id": result["pigment_id"],
            "ccd_code": result["ccd_code"], "chain": result["pigment_id"].split("_")[0],
            "band": band, "state_index": s["index"], "energy_ev": s["energy_ev"],
            "wavelength_nm": s["wavelength_nm"], "oscillator_strength": s["oscillator_strength"],
            "transition_dipole_debye": s["transition_dipole_norm_debye"],
            "eps_static": result["eps_static"], "eps_optical": result["eps_optical"],
            "eps_screen": result["eps_screen"], "alpha": f["alpha"],
            "omega_bohr_inv": f["omega_bohr_inv"], "basis": result["basis"],
            "response": result["response"]["method"], "solvation": result["solvation"],
            "scf_cycles": result.get("scf_cycles"),
            "scf_start": describe_start(result.get("scf_start")),
            "geometry": (result.get("geometry") or {}).get("mode", "crystal"),
            "geometry_rmsd_A": (result.get("geometry") or {}).get("rmsd_heavy_A", 0.0),
            "qm_hash": result.get("qm_hash")})
    return rows


def site_energies(result_files) -> pd.DataFrame:
    rows = []
    for p in result_files:
        rows += site_rows(read_json(p))
    return pd.DataFrame(rows, columns=SITE_COLUMNS).sort_values(
        ["variant", "mode", "pigment_id", "band"]).reset_index(drop=True)


def auto_pairs(pigment_ids, chains=None):
    """Pairs of same-type pigments on two chains with the same residue number (pseudo-symmetric
    copies numbered alike). Returns [(name, a, b)]."""
    parsed = {}
    for pid in pigment_ids:
        chain, rest = pid.split("_", 1)
        parsed.setdefault(rest, {})[chain] = pid
    pairs = []
    for rest, by_chain in sorted(parsed.items()):
        cs = [c for c in (chains or sorted(by_chain)) if c in by_chain]
        if len(cs) >= 2:
            pairs.append((f"{rest}:{cs[0]}-{cs[1]}", by_chain[cs[0]], by_chain[cs[1]]))
    return pairs


def _why(failures, variant, pid):
    """' (failed: reason)' of a pigment that was not computed in a variant, if known."""
    why = (failures or {}).get((variant, pid))
    return f" ({why})" if why else ""


def branch_shifts(sites: pd.DataFrame, pairs, failures=None) -> pd.DataFrame:
    """ΔE = E(a) − E(b) per variant, pair and band; pairs: [(name, a, b)]. failures:
    {(variant, pigment_id): reason} of pigments not computed (from the inventories), named in
    the status of a pair that lacks one or both partners."""
    rows = []
    variants = sorted(set(sites.variant) | {v for v, _p in (failures or {})})
    for variant, mode in [(v, m) for v in variants for m in sorted(set(sites["mode"]))]:
        sv = sites[(sites.variant == variant) & (sites["mode"] == mode)]
        for name, a, b in pairs:
            ea, eb = sv[sv.pigment_id == a], sv[sv.pigment_id == b]
            if ea.empty or eb.empty:
                gone = [f"{x} {pid}{_why(failures, variant, pid)}"
                        for x, pid, e in (("a", a, ea), ("b", b, eb)) if e.empty]
                rows.append({"variant": variant, "mode": mode, "pair": name, "pigment_a": a,
                             "pigment_b": b, "band": None,
                             "status": "missing " + " and ".join(gone)})
                continue
            for band in sorted(set(ea.band) & set(eb.band)):
                ra, rb = ea[ea.band == band].iloc[0], eb[eb.band == band].iloc[0]
                d = ra.energy_ev - rb.energy_ev
                rows.append({"variant": variant, "mode": mode, "pair": name, "pigment_a": a,
                             "pigment_b": b, "band": band, "energy_a_ev": ra.energy_ev,
                             "energy_b_ev": rb.energy_ev, "delta_ev": d,
                             "delta_cm1": d * EV2CM1,
                             "delta_nm": ra.wavelength_nm - rb.wavelength_nm,
                             "redder": a if d < 0 else b,
                             "eps_static_a": ra.eps_static, "eps_static_b": rb.eps_static,
                             "omega_bohr_inv": ra.omega_bohr_inv, "basis": ra.basis,
                             "status": "ok"})
    return pd.DataFrame(rows, columns=BRANCH_COLUMNS)


BRANCH_COLUMNS = ["variant", "mode", "pair", "pigment_a", "pigment_b", "band", "energy_a_ev",
                  "energy_b_ev", "delta_ev", "delta_cm1", "delta_nm", "redder", "eps_static_a",
                  "eps_static_b", "omega_bohr_inv", "basis", "status"]
VARIANT_COLUMNS = ["variant", "mode", "reference", "pigment_id", "band", "energy_variant_ev",
                   "energy_reference_ev", "delta_ev", "delta_cm1", "delta_nm",
                   "eps_static_variant", "eps_static_reference", "same_qm_inputs", "status"]


def variant_shifts(sites: pd.DataFrame, reference: str, failures=None) -> pd.DataFrame:
    """E(variant) − E(reference) per pigment, band and mode (continuum, embedded); unmatched
    pigments reported, with the reason one was not computed (failures, as in branch_shifts)."""
    rows = []
    for (variant, mode), sv in sites.groupby(["variant", "mode"], sort=True):
        if variant == reference:
            continue
        ref = sites[(sites.variant == reference) & (sites["mode"] == mode)]
        ids = sorted(set(sv.pigment_id) | set(ref.pigment_id))
        for pid in ids:
            a, r = sv[sv.pigment_id == pid], ref[ref.pigment_id == pid]
            if a.empty or r.empty:
                rows.append({"variant": variant, "mode": mode, "reference": reference,
                             "pigment_id": pid, "band": None,
                             "status": (f"only in reference{_why(failures, variant, pid)}"
                                        if a.empty else
                                        f"only in variant{_why(failures, reference, pid)}")})
                continue
            for band in sorted(set(a.band) & set(r.band)):
                va, vr = a[a.band == band].iloc[0], r[r.band == band].iloc[0]
                d = va.energy_ev - vr.energy_ev
                rows.append({"variant": variant, "mode": mode, "reference": reference,
                             "pigment_id": pid, "band": band, "energy_variant_ev": va.energy_ev,
                             "energy_reference_ev": vr.energy_ev, "delta_ev": d,
                             "delta_cm1": d * EV2CM1,
                             "delta_nm": va.wavelength_nm - vr.wavelength_nm,
                             "eps_static_variant": va.eps_static,
                             "eps_static_reference": vr.eps_static,
                             "same_qm_inputs": bool(va.qm_hash == vr.qm_hash), "status": "ok"})
    return pd.DataFrame(rows, columns=VARIANT_COLUMNS)


def spectrum(energies_ev, strengths, grid_ev, fwhm_ev=0.1):
    """Gaussian-broadened stick spectrum (arbitrary units, Σ f · normalised Gaussian)."""
    sig = fwhm_ev / (2 * np.sqrt(2 * np.log(2)))
    g = np.asarray(grid_ev)[:, None]
    return (np.asarray(strengths)[None] * np.exp(-0.5 * ((g - np.asarray(energies_ev)[None]) / sig)
                                               ** 2) / (sig * np.sqrt(2 * np.pi))).sum(1)


__all__ = ["site_energies", "branch_shifts", "variant_shifts", "auto_pairs", "spectrum", "NM_EV"]


def sweep_rows(sweep: dict) -> list:
    """Long rows of one ε sweep: one per ε point and band (named bands and S1)."""
    rows = []
    for pt in sweep["points"]:
        states = sorted(pt["states"], key=lambda s: s["energy_ev"])
        for band, s in [(s["band"], s) for s in states if s.get("band")] + [("S1", states[0])]:
            rows.append({"variant": sweep.get("variant"), "pigment_id": sweep["pigment_id"],
                         "ccd_code": sweep["ccd_code"], "eps_static": pt["eps_static"],
                         "eps_optical": pt["eps_optical"], "band": band,
                         "energy_ev": s["energy_ev"], "wavelength_nm": s["wavelength_nm"],
                         "oscillator_strength": s["oscillator_strength"],
                         "scf_cycles": pt["scf_cycles"], "scf_cycles_cold": pt["scf_cycles_cold"],
                         "scf_guess": pt.get("scf_guess"), "computed_as": pt.get("computed_as"),
                         "response_products": pt.get("response_products"),
                         "omega_bohr_inv": sweep["omega_bohr_inv"]})
    return rows


def dimer_sweep_rows(sweep: dict) -> list:
    """Rows of a dimer sweep in the ε-sweep table's shape: pigment_id is the dimer's name,
    band 'dimer_splitting', energy_ev the splitting (eV)."""
    return [{"variant": sweep["variant"], "pigment_id": sweep["dimer"], "ccd_code": "dimer",
             "eps_static": p["eps_static"], "eps_optical": p["eps_optical"],
             "band": "dimer_splitting", "energy_ev": p["splitting_ev"],
             "omega_bohr_inv": sweep["omega_bohr_inv"]} for p in sweep["points"]]


def eps_for_target(sweep: pd.DataFrame, target: dict, pairs: dict) -> dict:
    """The ε (uniform for the sites involved) at which a computed quantity equals a measured one.

    target: {name, kind: "branch" (pair: name of a configured pair, ΔE = E(a) − E(b)),
    "site" (pigment: id, E itself) or "dimer_splitting" (dimer: name of a dimer computed
    whole, its exciton pair's splitting; band ignored), variant, band, value_ev}. Linear
    interpolation between the bracketing grid points; reports the bracket, or why there is
    none.
    """
    band = "dimer_splitting" if target["kind"] == "dimer_splitting" else target["band"]
    out = {"target": target.get("name"), "kind": target["kind"], "variant": target["variant"],
           "band": band, "value_ev": target["value_ev"]}
    sv = sweep[(sweep.variant == target["variant"]) & (sweep.band == band)] if len(sweep) \
        else sweep
    if target["kind"] == "dimer_splitting":
        curve = sv[sv.pigment_id == target["dimer"]].set_index("eps_static") \
            .energy_ev.sort_index()
    elif target["kind"] == "branch":
        a, b = pairs[target["pair"]]
        ea = sv[sv.pigment_id == a].set_index("eps_static").energy_ev
        eb = sv[sv.pigment_id == b].set_index("eps_static").energy_ev
        curve = (ea - eb).dropna().sort_index()
    else:
        curve = sv[sv.pigment_id == target["pigment"]].set_index("eps_static") \
            .energy_ev.sort_index()
    eps, vals = curve.index.to_numpy(float), curve.to_numpy(float) - target["value_ev"]
    out.update(eps_min_scanned=float(eps.min()) if len(eps) else None,
               eps_max_scanned=float(eps.max()) if len(eps) else None)
    # flat: within what the SCF and Davidson tolerances resolve (see FLAT_EV)
    if len(vals) > 1 and np.ptp(vals) < FLAT_EV:
        out.update(eps_static=None, bracket_low=None, bracket_high=None,
                   status=f"computed value does not depend on ε (flat within {FLAT_EV:g} eV)")
        return out
    for k in range(len(eps) - 1):
        if vals[k] == 0 or vals[k] * vals[k + 1] < 0:
            t = 0.0 if vals[k] == 0 else vals[k] / (vals[k] - vals[k + 1])
            out.update(eps_static=float(eps[k] + t * (eps[k + 1] - eps[k])),
                       bracket_low=float(eps[k]), bracket_high=float(eps[k + 1]),
                       status="ok")
            return out
    out.update(eps_static=None, bracket_low=None, bracket_high=None,
               status="not bracketed by the scanned ε range" if len(eps) > 1 else
               "fewer than two sweep points")
    return out


def environment_table(environment_files, out_tsv):
    """One row per site: metrics, dielectric constants and each term's contribution."""
    rows = []
    for p in environment_files:
        d = io.read_json(p)
        variant = Path(p).parts[-4] if len(Path(p).parts) >= 4 else ""
        row = {"variant": variant, "pigment_id": d["pigment_id"], "ccd_code": d["ccd_code"]}
        row.update({k: v for k, v in d["metrics"].items()})
        row.update({k: v for k, v in d["dielectric"].items() if k != "pigment_id"})
        rows.append(row)
    df = pd.DataFrame(rows)
    io.write_tsv(out_tsv, df)
    log.info("environment table: %d sites -> %s", len(df), out_tsv)
    return df


def inventory_failures(inventories: dict) -> dict:
    """{(variant, pigment_id): reason} of every pigment an inventory found but could not model
    (status error), from variant -> inventory TSV."""
    out = {}
    for v, path in (inventories or {}).items():
        inv = pd.read_csv(path, sep="\t", keep_default_na=False)
        for r in inv[inv.status == "error"].itertuples():
            out[(v, r.pigment_id)] = f"failed: {r.problems}"
    return out


def shift_tables(result_files, out_sites, out_branches, out_variants, reference, branches=None,
                 out_pairs=None, reference_structure=None, altloc=default("altloc"), library=None,
                 inventories=None):
    """Site-energy, branch-shift and variant-shift tables (and the pair list used).
    inventories: variant -> inventory TSV, whose failed pigments are named in the shift tables."""
    failures = inventory_failures(inventories)
    sites = site_energies(result_files)
    branches = branches or {}
    pairs = [tuple(p) for p in branches.get("pairs", [])]
    pair_rows = [{"name": n, "pigment_a": a, "pigment_b": b, "source": "config"}
                 for n, a, b in pairs]
    if branches.get("auto"):
        known = {(a, b) for _n, a, b in pairs}
        found = []
        if reference_structure:
            from ..structures.pairing import auto_pairs_by_superposition
            atoms = read_structure(reference_structure, altloc)
            found = [r for r in auto_pairs_by_superposition(atoms, library or load_library(),
                                                            sorted(set(sites.ccd_code)))
                     if (r["pigment_a"], r["pigment_b"]) not in known]
            for r in found:
                log.info("auto pair %s: chains %s/%s superposed on %d CA, RMSD %.3f A; partner "
                         "%.2f A away after superposition", r["name"], r["chain_a"],
                         r["chain_b"], r["n_ca"], r["rmsd_A"], r["distance_A"])
            pair_rows += [{**r, "source": "superposition"} for r in found]
            pairs += [(r["name"], r["pigment_a"], r["pigment_b"]) for r in found]
        if not found:
            extra = [p for p in auto_pairs(sorted(set(sites.pigment_id)))
                     if (p[1], p[2]) not in known]
            pairs += extra
            pair_rows += [{"name": n, "pigment_a": a, "pigment_b": b,
                           "source": "equal residue numbers"} for n, a, b in extra]
    if out_pairs:
        io.write_tsv(out_pairs, pd.DataFrame(pair_rows, columns=sorted(
            {k for r in pair_rows for k in r}) or ["name", "pigment_a", "pigment_b", "source"]))
    for _n, a, b in pairs:
        for pid in (a, b):
            if pid not in set(sites.pigment_id):
                log.warning("branch pair pigment %s has no result in any variant", pid)
    br = branch_shifts(sites, pairs, failures)
    vs = variant_shifts(sites, reference, failures)
    io.write_tsv(out_sites, sites)
    io.write_tsv(out_branches, br)
    io.write_tsv(out_variants, vs)
    log.info("site energies: %d rows; branch shifts: %d rows; variant shifts: %d rows",
             len(sites), len(br), len(vs))
    if not vs.empty and "status" in vs:
        for _i, r in vs[vs.status != "ok"].iterrows():
            log.warning("variant %s: pigment %s %s", r.variant, r.pigment_id, r.status)
    return sites, br, vs


def sweep_tables(sweep_files, out_tsv, out_targets, pairs=(), targets=(), ion_pairs=()):
    """Long table of the ε sweeps (excitations; dimers' splittings; with the ion stage, IP, EA
    and the ion pairs of ``ion_pairs``) and, for each measured target, the ε that reproduces
    it."""
    from .ions import ion_sweep_rows
    rows, ions = [], []
    for p in sweep_files:
        d = io.read_json(p)
        if d.get("ions"):
            ions.append(d)
            continue
        rows += dimer_sweep_rows(d) if "dimer" in d else sweep_rows(d)
    rows += ion_sweep_rows(ions, ion_pairs)
    df = pd.DataFrame(rows)
    io.write_tsv(out_tsv, df)
    tg = pd.DataFrame([eps_for_target(df, t, dict((n, (a, b)) for n, a, b in pairs))
                       for t in targets])
    io.write_tsv(out_targets, tg)
    log.info("eps sweep: %d rows; %d target(s)", len(df), len(tg))
    return df, tg
