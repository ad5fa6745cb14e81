"""The coupling stage: each site's transition densities kept compactly, the couplings of every
pair of sites by three routes, exciton states per variant and group, absorption and CD.

Per site (:func:`transitions_stage`): the transition densities of the site's calculation (the
continuum-only one, or the embedded one when electrostatics is enabled; ``couplings.
site_energies``), fitted in an auxiliary basis and as transition charges, kept in the QM cache
beside the result they come from (``{qm_hash}.transitions.npz``), so a reused result keeps them.
Per variant (:func:`excitons_stage`): couplings of every pair within ``max_distance_A``, the
exciton Hamiltonian of the whole variant (group ``all``) and of each configured group, states
and spectra. Per study (:func:`coupling_tables`): the tables.
"""
from __future__ import annotations

import logging
import time
from pathlib import Path

import numpy as np
import pandas as pd

from ..base import io
from ..base.defaults import fill
from ..base.units import EV2CM1, NM_EV
from ..interactions.couplings import couple
from ..interactions.excitons import exciton_states, spectra
from ..interactions.transitions import SiteTransitions, site_transitions
from ..qm.scf import build_molecule
from .stages import cached_excite, load_response, site_start, study_omega

log = logging.getLogger("siteshift")

COUPLING_COLUMNS = ["variant", "pigment_a", "pigment_b", "band_a", "band_b", "state_a",
                    "state_b", "energy_a_ev", "energy_b_ev", "distance_A", "kappa",
                    "mu_a_debye", "mu_b_debye", "mu_a_computed_debye", "mu_b_computed_debye",
                    "j_tdc_cm1", "j_charges_cm1", "j_dipole_cm1",
                    "j_tdc_vacuum_cm1", "j_charges_vacuum_cm1", "j_dipole_vacuum_cm1",
                    "j_tdc_unscaled_cm1", "j_charges_unscaled_cm1", "j_dipole_unscaled_cm1",
                    "screening_model", "screening_factor", "dipole_scale_a", "dipole_scale_b",
                    "route_used"]
STATE_COLUMNS = ["variant", "group", "state", "energy_ev", "energy_cm1", "wavelength_nm",
                 "dipole_strength_D2", "oscillator_strength", "rotational_strength_DmuB",
                 "participation_ratio", "top_site", "top_weight", "weights"]


def pick_state(states, band="auto") -> dict:
    """The state of a site that couples: a band name, a state number, or auto (Qy where named,
    else bright, else a heme's Soret, else the lowest)."""
    by_band = {s.get("band"): s for s in states if s.get("band")}
    if str(band).isdigit():
        k = int(band)
        hit = [s for s in states if s["index"] == k]
        if not hit:
            raise KeyError(f"couplings.band: state {k} not computed ({len(states)} states)")
        return hit[0]
    if band == "auto":
        for name in ("Qy", "bright", "Soret"):
            if name in by_band:
                return by_band[name]
        return min(states, key=lambda s: s["energy_ev"])
    if band not in by_band:
        raise KeyError(f"couplings.band: no state named {band!r} among "
                       f"{sorted(b for b in by_band if b)}; choose another band or a state number")
    return by_band[band]


def transitions_path(cache_dir, qm_hash) -> Path:
    return Path(cache_dir) / f"{qm_hash}.transitions.npz"


def cached_transitions(res: dict, qm_hash: str, rec: dict, cache_dir,
                       auxbasis=None) -> SiteTransitions:
    """Compact transition densities of one QM result (kept in the cache beside it, computed
    once), with the band names and energies of `res`."""
    auxbasis = auxbasis or fill({}, "couplings")["auxbasis"]
    cached = transitions_path(cache_dir, qm_hash)
    t0 = time.perf_counter()
    st = SiteTransitions.load(cached) if cached.exists() else None
    if st is not None and st.auxbasis != auxbasis:
        st = None
    if st is None:
        arrays = load_response(Path(cache_dir) / f"{qm_hash}.json")
        if arrays is None or "xs" not in arrays:
            raise FileNotFoundError(f"{rec['pigment_id']}: the QM result {qm_hash} has no "
                                    f"response amplitudes in {cache_dir} (an open-shell or "
                                    "stock-solver site keeps none); rerun its excitation "
                                    "with solver: fast")
        mol = build_molecule(rec["elements"], rec["coords_A"], rec["charge"],
                             rec["multiplicity"] - 1, res["basis"])
        states = sorted(res["states"], key=lambda s: s["index"])
        st = site_transitions(mol, arrays["mo_coeff"], arrays["mo_occ"], arrays["xs"],
                              [s["energy_ev"] for s in states],
                              [s.get("band") for s in states], rec["pigment_id"],
                              rec["ccd_code"], auxbasis, qm_hash)
        st.save(cached)
        log.info("%s: transition densities fitted (%s, %d functions) and transition charges "
                 "(RMS %s Eh/e) in %.1f s", rec["pigment_id"], auxbasis,
                 st.aux_coeffs.shape[1], " ".join(f"{v:.1e}" for v in st.charge_rms),
                 time.perf_counter() - t0)
    else:
        log.info("%s: transition densities reused from %s", rec["pigment_id"], cached)
    # the copy's identity and today's band names, whichever copy computed the entry
    states = sorted(res["states"], key=lambda s: s["index"])
    st.pigment_id, st.ccd_code = rec["pigment_id"], rec["ccd_code"]
    st.bands = [s.get("band") or "" for s in states]
    st.energies_ev = np.array([s["energy_ev"] for s in states])
    return st


def transitions_stage(site_json, model_json, out_npz, cache_dir, auxbasis=None):
    """The transition densities of one site's calculation (see :func:`cached_transitions`)."""
    res = io.read_json(site_json)
    st = cached_transitions(res, res["qm_hash"], io.read_json(model_json), cache_dir, auxbasis)
    st.save(out_npz)
    return st


def measured_dipole_strength(ccd_code, band, setting, library) -> tuple[float | None, str]:
    """(D², source) of a measured dipole strength for a site's coupled band, or (None, why
    not) — by ``couplings.dipole_strength_D2``: 'library' (the pigment library's sourced value
    for that band), false/'off' (none), or {CCD: D²} (for the coupled band, on top of the
    library's)."""
    if setting is False or setting == "off":
        return None, "off (couplings.dipole_strength_D2)"
    if isinstance(setting, dict) and setting.get(ccd_code):
        return float(setting[ccd_code]), "couplings.dipole_strength_D2 in the study config"
    entry = (library or {}).get(ccd_code)
    values = getattr(entry, "dipole_strength_D2", {}) or {}
    if band in values:
        return float(values[band]), entry.dipole_strength_source
    return None, (f"no measured value for {ccd_code} {band or 'this band'} in the pigment "
                  "library")


def excitons_stage(transition_files, site_jsons, environment_jsons, out_json, cfg=None,
                   variant=None, library=None):
    """Couplings, exciton states and spectra of one variant's sites."""
    from ..structures.library import load_library
    cp = fill(cfg, "couplings")
    library = load_library() if library is None else library
    t0 = time.perf_counter()
    sites = [SiteTransitions.load(f) for f in transition_files]
    results = [io.read_json(f) for f in site_jsons]
    eps_opt = [io.read_json(f)["dielectric"]["eps_optical"] for f in environment_jsons]
    chosen = [pick_state(r["states"], cp["band"]) for r in results]
    ks = [c["index"] - 1 for c in chosen]
    scales, sources = [], []
    for s, k, c in zip(sites, ks, chosen):
        d2, why = measured_dipole_strength(s.ccd_code, c.get("band"), cp["dipole_strength_D2"],
                                           library)
        computed = float(np.linalg.norm(s.dipole_debye(k)))
        f = 1.0 if d2 is None else float(np.sqrt(d2) / computed)
        scales.append(f)
        sources.append(why)
        if d2 is None:
            log.info("%s: computed transition dipole %.2f D (%.1f D²) kept: %s", s.pigment_id,
                     computed, computed ** 2, why)
        else:
            log.info("%s: transition dipole %.2f D (%.1f D²) rescaled by %.3f to the measured "
                     "dipole strength %.1f D² (%s)", s.pigment_id, computed, computed ** 2, f,
                     d2, why)
    scr = cp["screening"]
    n = len(sites)
    rows, J = [], np.zeros((n, n))
    route_key = f"j_{cp['route']}_cm1"
    for i in range(n):
        for j in range(i + 1, n):
            eps = scr["eps_optical"] or 0.5 * (eps_opt[i] + eps_opt[j])
            row = couple(sites[i], sites[j], [ks[i]], [ks[j]], screening=scr["model"],
                         eps_optical=eps, screening_params={k: scr[k] for k in
                                                            ("A", "beta", "s0")},
                         dipole_scale_a=scales[i], dipole_scale_b=scales[j])[0]
            within = row["distance_A"] <= cp["max_distance_A"]
            row.update(variant=variant, route_used=cp["route"] if within else "beyond cutoff")
            if within:
                J[i, j] = J[j, i] = row[route_key]
            rows.append(row)
            log.info("%s–%s (%.1f Å, κ %.2f): J tdc %.2f, charges %.2f, dipole %.2f cm⁻¹ "
                     "(screening %s ×%.3f)", sites[i].pigment_id, sites[j].pigment_id,
                     row["distance_A"], row["kappa"], row["j_tdc_cm1"], row["j_charges_cm1"],
                     row["j_dipole_cm1"], scr["model"], row["screening_factor"])
    E = np.array([c["energy_ev"] for c in chosen])
    mu = np.array([s.dipole_debye(k) * f for s, k, f in zip(sites, ks, scales)])
    centres = np.array([s.centre_A(k) for s, k in zip(sites, ks)])
    ids = [s.pigment_id for s in sites]
    groups = {"all": ids, **{g: m for g, m in cp["groups"].items()}}
    sp = cp["spectra"]
    out_groups = {}
    for g, members in groups.items():
        missing = [m for m in members if m not in ids]
        if missing:
            log.warning("group %s: %s not among the coupled sites of %s; left out", g, missing,
                        variant)
        idx = [ids.index(m) for m in members if m in ids]
        if not idx:
            continue
        sub = np.ix_(idx, idx)
        st = exciton_states(E[idx], J[sub], mu[idx], centres[idx])
        spec = spectra(E[idx], J[sub], mu[idx], centres[idx], sp["homogeneous_fwhm_cm1"],
                       sp["disorder_fwhm_cm1"], sp["samples"], sp["seed"])
        out_groups[g] = {"sites": [ids[i] for i in idx],
                         "site_energies_ev": E[idx].tolist(),
                         "couplings_cm1": J[sub].tolist(),
                         "states": {k: np.asarray(v).tolist() for k, v in st.items()},
                         "spectra": {k: (np.asarray(v).tolist() if k != "samples" else v)
                                     for k, v in spec.items()}}
    out = {"variant": variant, "band": cp["band"], "route": cp["route"],
           "screening": scr, "max_distance_A": cp["max_distance_A"],
           "auxbasis": cp["auxbasis"], "sites": [
               {"pigment_id": s.pigment_id, "ccd_code": s.ccd_code, "state": k + 1,
                "band": c.get("band"), "energy_ev": c["energy_ev"],
                "dipole_debye": (s.dipole_debye(k) * f).tolist(), "dipole_scale": f,
                "dipole_computed_debye": s.dipole_debye(k).tolist(),
                "dipole_strength_source": why,
                "centre_A": s.centre_A(k).tolist(), "eps_optical": e,
                "transition_charge_rms_hartree": float(s.charge_rms[k]),
                "mode": r.get("mode", "continuum"), "qm_hash": s.qm_hash}
               for s, k, c, f, e, r, why in zip(sites, ks, chosen, scales, eps_opt, results,
                                                 sources)],
           "couplings": rows, "groups": out_groups, "spectra_settings": sp,
           "time_s": round(time.perf_counter() - t0, 3)}
    io.write_json(out_json, out)
    return out


def coupling_tables(exciton_files, out_couplings, out_states, out_spectra, dimer_files=(),
                    out_dimers=None):
    """couplings.tsv, exciton_states.tsv and exciton_spectra.tsv of every variant (and
    dimers.tsv of the dimers computed whole)."""
    crow, srow, prow = [], [], []
    for f in exciton_files:
        r = io.read_json(f)
        v = r["variant"]
        crow += r["couplings"]
        for g, grp in r["groups"].items():
            st, sites = grp["states"], grp["sites"]
            c = np.asarray(st["coefficients"])
            for k, e in enumerate(st["energies_ev"]):
                w = c[:, k] ** 2
                order = np.argsort(w)[::-1]
                srow.append({"variant": v, "group": g, "state": k + 1, "energy_ev": e,
                             "energy_cm1": e * EV2CM1, "wavelength_nm": NM_EV / e,
                             "dipole_strength_D2": st["dipole_strength_D2"][k],
                             "oscillator_strength": st["oscillator_strength"][k],
                             "rotational_strength_DmuB": st["rotational_strength_DmuB"][k],
                             "participation_ratio": st["participation_ratio"][k],
                             "top_site": sites[order[0]], "top_weight": float(w[order[0]]),
                             "weights": "; ".join(f"{sites[i]} {w[i]:.3f}" for i in order)})
            sp = grp["spectra"]
            for i, e in enumerate(sp["energy_ev"]):
                prow.append({"variant": v, "group": g, "energy_ev": e,
                             "wavelength_nm": sp["wavelength_nm"][i],
                             "wavenumber_cm1": sp["wavenumber_cm1"][i],
                             "absorption_D2_per_ev": sp["absorption_D2_per_ev"][i],
                             "cd_DmuB_per_ev": sp["cd_DmuB_per_ev"][i],
                             "epsilon_M1cm1": sp["epsilon_M1cm1"][i],
                             "delta_epsilon_M1cm1": sp["delta_epsilon_M1cm1"][i],
                             "monomer_absorption_D2_per_ev":
                                 sp["monomer_absorption_D2_per_ev"][i],
                             "samples": sp["samples"]})
    pd.DataFrame(crow, columns=COUPLING_COLUMNS).to_csv(out_couplings, sep="\t", index=False,
                                                         float_format="%.6g")
    pd.DataFrame(srow, columns=STATE_COLUMNS).to_csv(out_states, sep="\t", index=False,
                                                      float_format="%.6g")
    pd.DataFrame(prow).to_csv(out_spectra, sep="\t", index=False, float_format="%.6g")
    if out_dimers:
        dimer_rows(dimer_files).to_csv(out_dimers, sep="\t", index=False, float_format="%.6g")


DIMER_COLUMNS = ["variant", "dimer", "pigment_a", "pigment_b", "band", "eps_static",
                 "eps_optical", "energy_a_ev", "energy_b_ev", "dimer_state_lower",
                 "dimer_state_upper", "energy_lower_ev", "energy_upper_ev", "splitting_cm1",
                 "j_supermolecular_cm1", "j_tdc_cm1", "model_splitting_cm1",
                 "intensity_ratio_upper_lower", "rot_lower_DmuB", "rot_upper_DmuB",
                 "rot_velocity_lower_DmuB", "rot_velocity_upper_DmuB",
                 "model_rot_lower_DmuB", "model_rot_upper_DmuB", "charge_transfer_lower",
                 "charge_transfer_upper", "share_a_lower", "share_a_upper", "pair_weight_min",
                 "time_s"]


def dimer_at(recs, qm: dict, eps_s, eps_o, omega, cp: dict, cache_dir=None, label="",
             tuning_json=None, previous=None):
    """One supermolecular TDA of two QM models in a continuum (ε_static, ε_optical), with the
    monomers in the same continuum and their transition-density coupling model.

    Starts: each monomer's SCF from ``previous`` (pigment id → its orbitals at another ε, as
    :func:`siteshift.qm.warmstart.carried_start` reads them: a sweep's previous point), else
    from the tuning job's gas-phase orbitals; the dimer's from the two monomers' orbitals.
    Returns (result, the monomers' orbitals at this point in that layout, for the next)."""
    from ..interactions.dimer import excite_dimer, model_pair
    from .config import qm_settings
    t0 = time.perf_counter()
    sites, resp, ks, res_m = [], [], [], []
    previous = previous or {}
    for rec in recs:
        s = qm_settings(qm, eps_s, eps_o, omega, rec.get("nstates_default"))
        start = site_start(rec, s, tuning_json, orbitals=previous.get(rec["pigment_id"]))
        res, h, arrays = cached_excite(rec, s, cache_dir, label=f"{rec['pigment_id']} "
                                       f"(monomer of {label})", start=start)
        st = cached_transitions(res, h, rec, cache_dir, cp["auxbasis"])
        ks.append(pick_state(res["states"], cp["band"])["index"] - 1)
        sites.append(st)
        res_m.append(res)
        resp.append({**arrays, "energies_ev": st.energies_ev})
    row = couple(sites[0], sites[1], [ks[0]], [ks[1]], screening="none")[0]
    s = qm_settings(qm, eps_s, eps_o, omega)
    s.nstates = 2 * max(len(r["states"]) for r in res_m)
    log.info("%s (%s + %s): one TDA of %d atoms, %d states, eps %.2f/%.2f", label,
             recs[0]["pigment_id"], recs[1]["pigment_id"],
             sum(len(r["elements"]) for r in recs), s.nstates, eps_s, eps_o)
    out, res = excite_dimer(*[(r["elements"], r["coords_A"], r["charge"]) for r in recs], s,
                            resp[0], resp[1], ks[0], ks[1], log=log.info)
    lo, up = model_pair(row["energy_a_ev"], row["energy_b_ev"], row["j_tdc_vacuum_cm1"])
    j = row["j_tdc_vacuum_cm1"]
    model = exciton_states([row["energy_a_ev"], row["energy_b_ev"]], [[0.0, j], [j, 0.0]],
                           [st.dipole_debye(k) for st, k in zip(sites, ks)],
                           [st.centre_A(k) for st, k in zip(sites, ks)])
    out.update(model_rotational_strength_DmuB=model["rotational_strength_DmuB"].tolist(),
               pigments=[r["pigment_id"] for r in recs], band=cp["band"],
               eps_static=eps_s, eps_optical=eps_o, monomer_states=[k + 1 for k in ks],
               monomer_energies_ev=[row["energy_a_ev"], row["energy_b_ev"]],
               coupling=row, model_pair_ev=[lo, up], model_splitting_cm1=(up - lo) * EV2CM1,
               dimer_result={k: v for k, v in res.items() if not k.startswith("_")},
               time_s=round(time.perf_counter() - t0, 2))
    orbitals = {r["pigment_id"]: {"mo_coeff": a["mo_coeff"], "mo_occ": a["mo_occ"],
                                  "elements": r["elements"], "coords_A": r["coords_A"],
                                  "basis": s.basis,
                                  "source": f"{r['pigment_id']} at eps {eps_s:g} (previous point)"}
                for r, a in zip(recs, resp)}
    log.info("%s: pair S%d/S%d split %.1f cm⁻¹ (J %+.1f; model %.1f cm⁻¹ from J_tdc %+.1f), "
             "CT %.3f/%.3f, in %.1f s", label, *out["pair"], out["splitting_cm1"],
             out["j_supermolecular_cm1"], out["model_splitting_cm1"],
             row["j_tdc_vacuum_cm1"], *out["charge_transfer_pair"], out["time_s"])
    return out, orbitals


def dimer_stage(models, environments, out_json, qm: dict, cfg=None, tuning_json=None,
                cache_dir=None, variant=None, name=None):
    """Two sites computed whole (one supermolecular TDA in the pair's mean continuum), beside
    the coupling model of the same two monomers in the same continuum."""
    cp = fill(cfg, "couplings")
    recs = [io.read_json(m) for m in models]
    diel = [io.read_json(e)["dielectric"] for e in environments]
    eps_s = float(np.mean([d["eps_static"] for d in diel]))
    eps_o = float(np.mean([d["eps_optical"] for d in diel]))
    out, _orbitals = dimer_at(recs, qm, eps_s, eps_o, study_omega(qm, tuning_json), cp,
                              cache_dir, f"dimer {name}", tuning_json=tuning_json)
    out.update(variant=variant, dimer=name,
               note=("the coupling model uses the unscreened transition-density J: in the "
                     "supermolecule both monomers sit in one continuum, which screens their "
                     "interaction itself"))
    io.write_json(out_json, out)
    return out


def dimer_sweep_stage(models, out_json, qm: dict, eps_grid, n2=2.0, cfg=None,
                      tuning_json=None, cache_dir=None, variant=None, name=None):
    """A dimer computed whole over a grid of uniform ε_static (ε_optical = min(n², ε)): its
    splitting against ε, so the ε reproducing a measured splitting can be read off."""
    cp = fill(cfg, "couplings")
    recs = [io.read_json(m) for m in models]
    omega = study_omega(qm, tuning_json)
    points, previous = [], None
    for k, eps in enumerate(sorted(float(e) for e in eps_grid)):
        log.info("dimer %s sweep point %d/%d: eps_static %.2f", name, k + 1, len(eps_grid), eps)
        d, previous = dimer_at(recs, qm, eps, min(float(n2), eps), omega, cp, cache_dir,
                               f"dimer {name} at eps {eps:g}", tuning_json=tuning_json,
                               previous=previous)
        points.append({key: d[key] for key in (
            "eps_static", "eps_optical", "pair", "splitting_ev", "splitting_cm1",
            "j_supermolecular_cm1", "model_splitting_cm1", "intensity_ratio_upper_lower",
            "charge_transfer_pair", "monomer_energies_ev", "time_s")}
                      | {"scf_start": d["dimer_result"]["scf_start"]["kind"],
                         "scf_cycles": d["dimer_result"]["scf_cycles"]})
    out = {"variant": variant, "dimer": name, "pigments": [r["pigment_id"] for r in recs],
           "band": cp["band"], "omega_bohr_inv": omega, "points": points}
    io.write_json(out_json, out)
    return out


def dimer_rows(dimer_files) -> pd.DataFrame:
    rows = []
    for f in dimer_files:
        d = io.read_json(f)
        lo, up = (d["states"][i - 1] for i in d["pair"])
        rows.append({"variant": d["variant"], "dimer": d["dimer"],
                     "pigment_a": d["pigments"][0], "pigment_b": d["pigments"][1],
                     "band": d["band"], "eps_static": d["eps_static"],
                     "eps_optical": d["eps_optical"],
                     "energy_a_ev": d["monomer_energies_ev"][0],
                     "energy_b_ev": d["monomer_energies_ev"][1],
                     "dimer_state_lower": lo["state"], "dimer_state_upper": up["state"],
                     "energy_lower_ev": lo["energy_ev"], "energy_upper_ev": up["energy_ev"],
                     "splitting_cm1": d["splitting_cm1"],
                     "j_supermolecular_cm1": d["j_supermolecular_cm1"],
                     "j_tdc_cm1": d["coupling"]["j_tdc_vacuum_cm1"],
                     "model_splitting_cm1": d["model_splitting_cm1"],
                     "intensity_ratio_upper_lower": d["intensity_ratio_upper_lower"],
                     "rot_lower_DmuB": lo.get("rotational_strength_DmuB"),
                     "rot_upper_DmuB": up.get("rotational_strength_DmuB"),
                     "rot_velocity_lower_DmuB": lo.get("rotational_strength_velocity_DmuB"),
                     "rot_velocity_upper_DmuB": up.get("rotational_strength_velocity_DmuB"),
                     "model_rot_lower_DmuB": (d.get("model_rotational_strength_DmuB")
                                              or [None, None])[0],
                     "model_rot_upper_DmuB": (d.get("model_rotational_strength_DmuB")
                                              or [None, None])[1],
                     "charge_transfer_lower": lo["charge_transfer"],
                     "charge_transfer_upper": up["charge_transfer"],
                     "share_a_lower": lo["share_a"], "share_a_upper": up["share_a"],
                     "pair_weight_min": min(d["pair_weights"]), "time_s": d["time_s"]})
    return pd.DataFrame(rows, columns=DIMER_COLUMNS)
