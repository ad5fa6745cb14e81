"""The electrostatics stage: the protein's charges in each site's QM calculation, and which
residues shift each site.

Per study: ESP-fitted charges per pigment type (:func:`fit_pigment_charges_stage`), partial
charges of every atom of each structure (:func:`charges_stage`). Per site: the continuum-only
reference and the embedded calculation, and the first-order decomposition of the shift by residue
with the reference's relaxed difference density (:func:`embedded_stage`). Per study again: the
tables and the branch-pair residues (:mod:`.residues`) and the mutation scan
(:mod:`.mutation_scan`). A whole structure at first order: :func:`survey_structure` (the
`siteshift electrostatics` command).

How the charges and the continuum share the work (configurable; recorded in every result):
- ``screening``: the charges' field is divided by the site's ε_optical (default), its ε_static,
  or not at all. The charges sit in a polarisable medium whose electronic part screens their
  field; charge-density-coupling studies of pigment–protein complexes scale the protein's
  charges by an effective 1/ε of about 1/2 to 1/3 (from memory: Adolphs, Müh, Madjet, Renger,
  Photosynth. Res. 95, 197 (2008), and later CDC work), i.e. about the optical ε ≈ 2.
- ``cavity``: the continuum around the QM model keeps the site's ε_static (default: the charges
  add the protein's permanent field to the same continuum as the continuum-only mode, so their
  difference is the charges' effect alone), or takes ε_optical (the continuum then stands for the
  electronic polarisation only, as in polarisable-embedding practice; the reference is
  recomputed at that ε so the shift is still the charges' alone).
"""
from __future__ import annotations

import logging
import time
from pathlib import Path

import numpy as np
import pandas as pd

from ..base import io
from ..base.defaults import default, fill
from ..base.units import EV2CM1, HARTREE2EV
from ..environment.charges import (ChargeSettings, assign_charges, residue_key,
                                   residue_totals, site_charges)
from ..qm.embedding import DensityPotential, PointCharges, first_order_shifts
from ..qm.scf import build_molecule
from ..qm.settings import EngineError
from .geometry import geometry_note
from .stages import cached_excite, density_path, site_settings, site_start, study_omega

log = logging.getLogger("siteshift")
ELECTRO = default("electrostatics")


def charge_settings(el: dict | None) -> ChargeSettings:
    el = fill(el, "electrostatics")
    return ChargeSettings(ph=float(el["ph"]), unknown=el["unknown_residues"],
                          residue_charges=dict(el["residue_charges"]))


def fit_pigment_charges_stage(model_json, out_json, qm: dict, tuning_json=None):
    """ESP-fitted charges of one pigment type on its QM model (gas phase, the study's basis
    and functional with the tuned ω), once per CCD code."""
    from ..qm.esp import esp_charges
    from ..qm.scf import make_scf, run_scf
    from .config import qm_settings
    rec = io.read_json(model_json)
    omega = study_omega(qm, tuning_json)
    s = qm_settings(qm, 1.0, 1.0, omega)
    t0 = time.perf_counter()
    mol = build_molecule(rec["elements"], rec["coords_A"], rec["charge"],
                         rec["multiplicity"] - 1, s.basis, s.max_memory_mb)
    # the tuning job converged this very SCF (gas phase, ω within its tolerance) on this type
    dm0, how = site_start(rec, s, tuning_json)()
    log.info("%s: SCF start %s", rec["ccd_code"], how.get("source", how.get("reason")))
    mf, step, cycles = run_scf(make_scf(mol, s), dm0=dm0, log=log.info)
    fit = esp_charges(mf, rec["elements"], rec["coords_A"], rec["charge"])
    out = {"ccd_code": rec["ccd_code"], "fitted_on": rec["pigment_id"], "names": rec["names"],
           "elements": rec["elements"], **fit, "total_charge_e": rec["charge"],
           "basis": s.basis, "functional": s.functional.as_dict(), "medium": "gas phase",
           "scheme": "Merz-Kollman-Singh ESP fit (shells 1.4-2.0 x vdW radii)",
           "scf_cycles": cycles, "scf_start": how,
           "time_s": round(time.perf_counter() - t0, 2)}
    io.write_json(out_json, out)
    log.info("%s: ESP charges on %d atoms (%d points, RMS %.2e Eh/e); dipole %s D (QM %s D)",
             rec["ccd_code"], len(fit["charges"]), fit["n_points"], fit["rms_hartree"],
             np.round(fit["dipole_fit_debye"], 3), np.round(fit["dipole_qm_debye"], 3))
    return out


def charges_stage(structure, out_charges, out_report, pigment_charge_files, library,
                  altloc=None, el=None, overrides=None):
    """Partial charges of every atom of one structure (TSV) and the choices made (TSV)."""
    from ..structures.reading import read_structure
    atoms = read_structure(structure, altloc or default("altloc"))
    fits = {}
    for f in pigment_charge_files or []:
        d = io.read_json(f)
        fits[d["ccd_code"]] = d
    t0 = time.perf_counter()
    charges, report = assign_charges(atoms, library, fits, charge_settings(el), overrides)
    io.write_tsv(out_charges, charges)
    io.write_tsv(out_report, report)
    tot = residue_totals(charges)
    his = report[report.kind == "histidine"]
    log.info("%s: %d charges, total %+.3f e, %d residues (all integral: %s); %d histidines "
             "(%s); %.1f s", structure, len(charges), charges.charge_e.sum(), len(tot),
             bool(np.allclose(tot, np.round(tot), atol=1e-3)), len(his),
             ", ".join(f"{c} {n}" for c, n in his.choice.value_counts().items()),
             time.perf_counter() - t0)
    for _i, r in report[report.kind != "histidine"].iterrows():
        log.info("  %s %s%s: %s (%s)", r.chain, r.resname, r.resid, r.choice, r.note)
    return charges, report


def screening_eps(el: dict, dielectric: dict) -> float:
    """The ε that divides the charges' field (see the module docstring)."""
    how = fill(el, "electrostatics")["screening"]
    return {"none": 1.0, "optical": float(dielectric["eps_optical"]),
            "static": float(dielectric["eps_static"])}[how]


def site_point_charges(charges: pd.DataFrame, rec: dict, el: dict, dielectric: dict):
    """(PointCharges with residue labels, notes) of one site's embedding."""
    el = fill(el, "electrostatics")
    coords, q, keys, notes = site_charges(charges, rec)
    w = float(el["smearing_A"])
    eps = screening_eps(el, dielectric)
    pc = PointCharges(coords, q, np.full(len(q), w) if w > 0 else None, scale=1.0 / eps,
                      labels=keys)
    return pc, notes


def residue_contributions(mol, P, pc: PointCharges, coords_model_A,
                          potential=None) -> pd.DataFrame:
    """First-order shift (meV, cm⁻¹) of one state by each residue, sorted by magnitude.
    potential: P's :class:`siteshift.qm.embedding.DensityPotential` (fitted far field)."""
    de = first_order_shifts(mol, P, pc, potential) * HARTREE2EV * 1000.0
    X = np.asarray(coords_model_A, float)
    dmin = np.min(np.linalg.norm(pc.coords_A[:, None, :] - X[None], axis=-1), axis=1)
    df = pd.DataFrame({"residue": pc.labels, "shift_mev": de, "charge_e": pc.charges,
                       "d": dmin})
    g = df.groupby("residue", sort=False).agg(shift_mev=("shift_mev", "sum"),
                                              charge_e=("charge_e", "sum"),
                                              n_atoms=("d", "size"),
                                              min_distance_A=("d", "min")).reset_index()
    g["shift_cm1"] = g.shift_mev / 1000.0 * EV2CM1
    g["charge_e"] = g.charge_e.round(4)
    return g.reindex(g.shift_mev.abs().sort_values(ascending=False).index).reset_index(drop=True)


def _band_states(result):
    """{band or S1: state} of a result (named bands and the lowest state)."""
    states = sorted(result["states"], key=lambda s: s["energy_ev"])
    out = {s["band"]: s for s in states if s.get("band")}
    out.setdefault("S1", states[0])
    return out


def embedded_stage(model_json, environment_json, charges_tsv, out_json, qm: dict, el: dict,
                   tuning_json=None, cache_dir=None, variant=None):
    """The embedded site calculation with its continuum-only reference, and the shift by
    residue (first order, relaxed difference density of the reference)."""
    el = fill(el, "electrostatics")
    rec = io.read_json(model_json)
    diel = io.read_json(environment_json)["dielectric"]
    settings = site_settings(rec, diel, qm, tuning_json)
    if el["cavity"] == "optical":
        settings.eps_static = settings.eps_optical
    charges = pd.read_csv(charges_tsv, sep="\t", keep_default_na=False)
    pc, notes = site_point_charges(charges, rec, el, diel)
    ref, h_ref, arrays = cached_excite(rec, settings, cache_dir, relaxed=True,
                                       label=f"{rec['pigment_id']} (reference)",
                                       start=site_start(rec, settings, tuning_json))
    # the embedded SCF starts from the continuum-only ground state of the same site
    emb, h_emb, _ = cached_excite(
        rec, settings, cache_dir, charges=pc, label=f"{rec['pigment_id']} (embedded)",
        start=site_start(rec, settings, tuning_json,
                         density=density_path(Path(cache_dir) / f"{h_ref}.json")
                         if cache_dir else None,
                         source=f"the continuum-only result of this site ({h_ref})"))
    mol = build_molecule(rec["elements"], rec["coords_A"], rec["charge"],
                         rec["multiplicity"] - 1, settings.basis, settings.max_memory_mb)
    t0 = time.perf_counter()
    ref_states, emb_states = _band_states(ref), _band_states(emb)
    bands = {}
    for band, rs in ref_states.items():
        es = emb_states.get(band) or next((s for s in emb["states"]
                                           if s["index"] == rs["index"]), None)
        key = f"relaxed_{rs['index']}"
        if es is None or arrays is None or key not in arrays:
            continue
        contrib = residue_contributions(mol, arrays[key], pc, rec["coords_A"])
        full = (es["energy_ev"] - rs["energy_ev"]) * 1000.0
        first = float(contrib.shift_mev.sum())
        bands[band] = {"reference_state": rs["index"], "embedded_state": es["index"],
                       "energy_continuum_ev": rs["energy_ev"], "energy_embedded_ev":
                       es["energy_ev"], "shift_full_mev": full, "shift_first_order_mev": first,
                       "residues": contrib.to_dict(orient="records")}
        log.info("%s %s: continuum %.4f eV, embedded %.4f eV: shift %+.2f meV (first order "
                 "%+.2f meV); top %s", rec["pigment_id"], band, rs["energy_ev"],
                 es["energy_ev"], full, first,
                 ", ".join(f"{r.residue} {r.shift_mev:+.2f}" for r in contrib.head(3).itertuples()))
    out = dict(emb)
    out.update(pigment_id=rec["pigment_id"], ccd_code=rec["ccd_code"], variant=variant,
               qm_hash=h_emb, mode="embedded", dielectric_source=diel["source"],
               tuning=str(tuning_json) if tuning_json else "fixed",
               geometry=geometry_note(rec))
    out["electrostatics"] = {
        "screening": el["screening"], "eps_screening": screening_eps(el, diel),
        "charge_scale": pc.scale, "cavity": el["cavity"], "eps_static_cavity":
        settings.eps_static, "smearing_A": el["smearing_A"], "reference_qm_hash": h_ref,
        "reference_cache": ref.get("cache"), **pc.summary(), "notes": notes,
        "interaction_energy_ev": (emb.get("embedding") or {}).get("interaction_energy_ev"),
        "attribution": "first order, relaxed difference density of the reference",
        "attribution_time_s": round(time.perf_counter() - t0, 3), "bands": bands}
    io.write_json(out_json, out)
    return out


#: a residue with a heavy atom this close (Å) to a heavy atom of the QM model is flagged in
#: the survey: bonding distance (the metal-donor distance of
#: :func:`siteshift.structures.ligands.metal_donors`; covalent links are shorter)
CONTACT_A = 2.6


def _contacts(charges: pd.DataFrame, rec: dict, embedded: set) -> list:
    """Residue keys (among those embedded) with a heavy atom within CONTACT_A of a heavy
    atom of the QM model."""
    heavy = charges[charges.element.astype(str).str.upper() != "H"]
    X = np.asarray(rec["coords_A"], float)[[e != "H" for e in rec["elements"]]]
    P = heavy[["x_A", "y_A", "z_A"]].to_numpy(float)
    d = np.full(len(P), np.inf)
    for i0 in range(0, len(P), 4096):
        d[i0:i0 + 4096] = np.linalg.norm(P[i0:i0 + 4096, None] - X[None], axis=-1).min(axis=1)
    near = heavy[d < CONTACT_A]
    keys = {residue_key(c, n, i, k) for c, n, i, k in
            zip(near.chain, near.resname, near.resid, near.icode)}
    return sorted(keys & embedded)


def survey_structure(structure, library, qm: dict, pigment=None, eps_static=None,
                     eps_optical=None, el=None, cache_dir="siteshift_cache", altloc=None,
                     top=10, axial_ligands=None):
    """First-order electrostatic shift of every pigment of a structure, by residue, with one
    relaxed difference density per pigment type (computed once in a uniform continuum and kept
    in cache_dir; its SCF starts from the type's gas-phase ESP-charge density, same model and
    basis) carried to each copy by superposing its QM model.

    Every copy's charges (all atoms but its own pigment) are moved into the frame of the
    type's reference copy by the least-squares superposition of the two QM models' heavy atoms
    (Kabsch), so a copy whose geometry differs from the reference's is approximated by the
    reference's density (the RMSD is reported). axial_ligands (None: extract.axial_ligands,
    as the workflow): the metal's coordinating side chains join each QM model (their charges
    then leave the embedding set)."""
    from ..structures.ligands import add_axial_ligands

    from ..structures.inventory import model_for, pigment_residues
    from ..structures.qmmodel import kabsch
    from ..structures.reading import read_structure
    from .stages import model_record
    el = fill(el, "electrostatics")
    if axial_ligands is None:       # as the workflow's QM models
        axial_ligands = bool(default("extract.axial_ligands"))
    diel_default = default("dielectric")
    eps_s = float(eps_static if eps_static is not None else diel_default["eps_uniform"])
    eps_o = float(eps_optical if eps_optical is not None else min(diel_default["eps_optical"],
                                                                  eps_s))
    diel = {"eps_static": eps_s, "eps_optical": eps_o, "source": "uniform"}
    cache = Path(cache_dir)
    t0 = time.perf_counter()
    atoms = read_structure(structure, altloc or default("altloc"))
    pigs, _ = pigment_residues(atoms, library)
    models = {}
    for p in pigs:
        try:
            env = atoms[~np.isin(atoms.indices, p.atoms.indices)]
            m = model_for(p, library, env=env)
            if axial_ligands:
                m = add_axial_ligands(m, library[p.code], env)
            models[p.id] = (p, m)
        except ValueError as exc:
            log.warning("%s: no QM model (%s); its charges and its shift are left out", p.id,
                        exc)
    if pigment and pigment not in models:
        raise KeyError(f"pigment {pigment} not found (or without a QM model) in {structure}; "
                       f"present: {sorted(models)}")
    refs, fits, timings = {}, {}, {}
    for pid, (p, m) in models.items():
        if p.code not in refs:
            refs[p.code] = (pid, model_record(m, library[p.code], structure))
    for code, (pid, rec) in refs.items():
        if rec["multiplicity"] != 1 and (not pigment or models[pigment][0].code == code):
            raise EngineError(
                f"{structure}: pigment type {code} (reference copy {pid}) has an open-shell QM "
                f"model (charge {rec['charge']:+d}, multiplicity {rec['multiplicity']}"
                f"{', set by its axial ligands' if axial_ligands else ''}); the "
                "survey's relaxed difference densities are closed-shell only. Give the type a "
                "closed-shell state in a pigment library (--library FILE: ligation_states or "
                "charge/multiplicity, e.g. Fe(II) low spin: charge 0, multiplicity 1), or "
                "leave the axial ligands out of the QM model (--no-axial-ligands; their charges "
                "then sit next to the metal and are flagged)")
    esp_settings, esp_paths = _esp_settings(qm), {}
    for code, (pid, rec) in refs.items():
        t = time.perf_counter()
        esp_paths[code] = _esp_path(rec, esp_settings, cache)
        fits[code] = _cached_esp(rec, esp_settings, esp_paths[code])
        timings[f"esp_{code}_s"] = round(time.perf_counter() - t, 2)
    t = time.perf_counter()
    fit_dicts = {c: {"names": refs[c][1]["names"], "charges": f["charges"]}
                 for c, f in fits.items()}
    charges, report = assign_charges(atoms, library, fit_dicts, charge_settings(el))
    bad = [r for r in pigs if r.id not in models]
    if bad:
        log.warning("pigments without a QM model carry no charges: %s", [b.id for b in bad])
    timings["charges_s"] = round(time.perf_counter() - t, 2)
    settings_by_code, dens = {}, {}
    from .config import qm_settings
    for code, (pid, rec) in refs.items():
        if pigment and models[pigment][0].code != code:
            continue
        t = time.perf_counter()
        s = qm_settings(qm, eps_s, eps_o, qm.get("omega"), rec.get("nstates_default"))
        # the continuum SCF starts from the same model's gas-phase ESP density (same basis)
        res, h, arrays = cached_excite(
            rec, s, cache, relaxed=True, label=f"{code} (reference copy {pid})",
            start=site_start(rec, s, density=esp_paths[code].with_suffix(".dm.npy"),
                             source=f"the gas-phase ESP-charge SCF of {pid}"))
        settings_by_code[code] = s
        dens[code] = (rec, res, arrays)
        timings[f"density_{code}_s"] = round(time.perf_counter() - t, 2)
    t = time.perf_counter()
    out = []
    # a reference whose TDA has states at or below zero is not the ground state: say so
    ref_warnings = {}
    for code, (_rec, res_ref, _arrays) in dens.items():
        for w in res_ref.get("band_warnings") or []:
            if w.startswith("reference:"):
                ref_warnings.setdefault(code, []).append(w)
                log.warning("%s: %s", code, w)
    # one potential per pigment type and band: its density's fit is shared by every copy
    exact_within = el.get("survey_exact_within_A")
    potentials, mols = {}, {}
    for code, (rec_ref, res_ref, arrays) in dens.items():
        mols[code] = mol = build_molecule(
            rec_ref["elements"], rec_ref["coords_A"], rec_ref["charge"],
            rec_ref["multiplicity"] - 1, settings_by_code[code].basis)
        shared = {}     # the fitting basis, metric and its moments: once per type
        for band, st in _band_states(res_ref).items():
            key = f"relaxed_{st['index']}"
            if key in arrays:
                potentials[code, band] = DensityPotential(mol, arrays[key], exact_within,
                                                          shared=shared)
    copies = [(pid, p, m) for pid, (p, m) in models.items()
              if not (pigment and pid != pigment) and p.code in dens]
    for done, (pid, p, m) in enumerate(copies, start=1):
        rec_ref, res_ref, arrays = dens[p.code]
        rec = model_record(m, library[p.code], structure)
        common = [n for n, o in zip(rec["names"], rec["origin"]) if o == "structure"
                  and n in rec_ref["names"]]
        X = np.array([rec["coords_A"][rec["names"].index(n)] for n in common])
        Y = np.array([rec_ref["coords_A"][rec_ref["names"].index(n)] for n in common])
        R, tr = kabsch(X, Y)
        rmsd = float(np.sqrt(((X @ R + tr - Y) ** 2).sum(1).mean()))
        coords, q, keys, notes = site_charges(charges, rec)
        eps_scr = screening_eps(el, diel)
        w = float(el["smearing_A"])
        pc = PointCharges(coords @ R + tr, q, np.full(len(q), w) if w > 0 else None,
                          scale=1.0 / eps_scr, labels=keys)
        mol = mols[p.code]
        bands = {}
        for band, st in _band_states(res_ref).items():
            key = f"relaxed_{st['index']}"
            if key not in arrays:
                continue
            contrib = residue_contributions(mol, arrays[key], pc, rec_ref["coords_A"],
                                            potential=potentials[p.code, band])
            bands[band] = {"state": st["index"], "energy_reference_ev": st["energy_ev"],
                           "shift_first_order_mev": float(contrib.shift_mev.sum()),
                           "residues": contrib.head(top).to_dict(orient="records")}
        out.append({"pigment_id": pid, "ccd_code": p.code, "reference_copy": refs[p.code][0],
                    "superposition_rmsd_A": rmsd, "n_charges": len(pc),
                    "total_charge_e": float(q.sum()), "notes": notes, "bands": bands})
        # a point charge at bonding distance (e.g. a metal's donor atom left out of the QM
        # model) has a first-order contribution that is not meaningful: say so
        close = _contacts(charges, rec, set(keys))
        if close:
            out[-1]["warnings"] = [
                f"{', '.join(close)}: charges within {CONTACT_A} Å of the QM model (bonding "
                "distance); their first-order contributions are not reliable" +
                ("; add the metal's ligands to the QM model (--axial-ligands)"
                 if not axial_ligands else "")]
            log.warning("%s: %s", pid, out[-1]["warnings"][0])
        log.info("attribution: %s (%d of %d), %d charges, %.1f s so far", pid, done,
                 len(copies), len(pc), time.perf_counter() - t)
    timings["attribution_s"] = round(time.perf_counter() - t, 2)
    timings["total_s"] = round(time.perf_counter() - t0, 2)
    return {"structure": str(structure), "eps_static": eps_s, "eps_optical": eps_o,
            "screening": el["screening"], "charge_scale": 1.0 / screening_eps(el, diel),
            "n_atoms_charged": int(len(charges)), "total_charge_e": float(charges.charge_e.sum()),
            "exact_within_A": exact_within,
            "charges_exact": sum(v.n_exact for v in potentials.values()),
            "charges_fitted": sum(v.n_fitted for v in potentials.values()),
            "protonation": report.to_dict(orient="records"), "pigments": out,
            "reference_warnings": ref_warnings,
            "timings_s": timings}


#: settings that change the excitations but not the ground state: left out of the ESP key
RESPONSE_ONLY_SETTINGS = ("nstates", "tda", "solver", "response_tol", "response_grid_level",
                          "occ_window_ev", "vir_window_ev", "equilibrium", "eps_optical")


def _esp_settings(qm):
    """The gas-phase settings of the ESP-charge SCF (ε 1, the study's preset and ω)."""
    from .config import qm_settings
    return qm_settings(qm, 1.0, 1.0, qm.get("omega"))


def _esp_path(rec, settings, cache):
    """Where the ESP charges of one pigment type's QM model are kept: a hash of the QM job's
    key (:func:`siteshift.study.stages.qm_key`: model, charge, spin, ground-state settings, code
    and PySCF versions), the ground-state density beside it (``.dm.npy``)."""
    from .stages import qm_key
    key = qm_key({**rec, "band_axes": None}, settings)
    key["settings"] = {k: v for k, v in key["settings"].items()
                       if k not in RESPONSE_ONLY_SETTINGS}
    return Path(cache) / f"esp_{io.stable_hash({'esp': rec['ccd_code'], **key})}.json"


def _cached_esp(rec, s, path):
    """ESP charges of one pigment type's QM model (gas-phase settings s), computed once and
    kept at path (:func:`_esp_path`); the SCF's density is kept too, as the start of the
    type's difference-density SCF on the same model."""
    from ..qm.esp import esp_charges
    from ..qm.scf import make_scf, run_scf
    if path.exists():
        log.info("%s: ESP charges reused from %s", rec["ccd_code"], path)
        return io.read_json(path)
    mol = build_molecule(rec["elements"], rec["coords_A"], rec["charge"],
                         rec["multiplicity"] - 1, s.basis, s.max_memory_mb)
    log.info("%s: ESP-charge SCF, %d atoms, %s (%d basis functions), gas phase, charge %+d, "
             "2S %d; kept in %s for later calls", rec["ccd_code"], mol.natm, s.basis, mol.nao,
             rec["charge"], rec["multiplicity"] - 1, path)
    mf, _step, _cycles = run_scf(make_scf(mol, s), log=log.info)
    fit = esp_charges(mf, rec["elements"], rec["coords_A"], rec["charge"])
    path.parent.mkdir(parents=True, exist_ok=True)
    np.save(path.with_suffix(".dm.npy"), mf.make_rdm1())
    io.write_json(path, fit)
    return fit
