"""The stages of a study as plain functions over files; the Snakemake scripts call these."""
from __future__ import annotations

import logging
import sys
import time
from dataclasses import asdict
from pathlib import Path

import numpy as np
import pandas as pd

from ..base import io
from ..base.defaults import RUN_ONLY_QM_KEYS, default, fill
from ..environment.dielectric import DielectricModel
from ..environment.metrics import EnvironmentSettings, environment_arrays, site_metrics
from ..qm.bands import assign_bands
from ..qm.excite import excite
from ..qm.scf import build_molecule
from ..qm.settings import ExciteSettings
from ..qm.tuning import tune_omega
from ..qm.warmstart import carried_start, save_orbitals, warm_density
from ..structures.inventory import (INVENTORY_COLUMNS, flag_interfaces, model_for,
                                    pigment_residues, take_inventory)
from ..structures.library import load_library
from .geometry import geometry_note
from ..structures.qmmodel import QMModel
from ..structures.reading import StructureError, read_structure

log = logging.getLogger("siteshift")
_ALTLOC = default("altloc")
_CUTOFF = default("extract.cluster_cutoff_A")


def setup_logging(path=None, level=logging.INFO):
    """Log to a file (the rule's log) and stderr, with timestamps."""
    root = logging.getLogger()
    root.setLevel(level)
    fmt = logging.Formatter("%(asctime)s %(levelname)s %(message)s", "%H:%M:%S")
    for h in list(root.handlers):
        root.removeHandler(h)
    hs = [logging.StreamHandler()]
    if path:
        Path(path).parent.mkdir(parents=True, exist_ok=True)
        hs.append(logging.FileHandler(path, mode="w"))
    for h in hs:
        h.setFormatter(fmt)
        root.addHandler(h)
    logging.getLogger("MDAnalysis").setLevel(logging.WARNING)
    if path:   # a workflow job: its own errors end it with one line, not a traceback
        sys.excepthook = _one_line_errors


def _one_line_errors(exc_type, exc, tb):
    """Exceptions siteshift raises on purpose (bad input, a configuration the job cannot use)
    carry a message naming the file, residue or key and the fix: log that line alone. Any other
    exception is a bug and keeps its traceback."""
    if exc_type.__module__.startswith("siteshift."):
        log.error("%s", exc)
    else:
        sys.__excepthook__(exc_type, exc, tb)


def job_qm(sm) -> dict:
    """A workflow job's `qm` settings: the rule's params (the keys that change numbers) and the
    run-only keys (threads, max_memory_mb) from the config, so changing those reruns nothing."""
    qm = dict(sm.params.qm)
    run = (sm.config or {}).get("qm") or {}
    qm.update({k: run[k] for k in RUN_ONLY_QM_KEYS if k in run})
    return qm


def inventory_stage(structure, out_tsv, out_json=None, library=None, altloc=_ALTLOC,
                    overrides=None, checks=None, axial_ligands=None):
    """Write the inventory table (and JSON) of one structure; return the rows. checks: the
    config's `structure_checks` (clash_A, on_clash, rebuild_missing); axial_ligands: as
    extract.axial_ligands (metal donors left outside the QM model are flagged)."""
    library = library or load_library()
    checks = fill(checks, "structure_checks")
    chosen = {}
    atoms = read_structure(structure, altloc, report=chosen)
    if axial_ligands is None:
        axial_ligands = default("extract.axial_ligands")
    rows = take_inventory(atoms, library, overrides, altlocs=chosen, clash_A=checks["clash_A"],
                          on_clash=checks["on_clash"], rebuild_missing=checks["rebuild_missing"],
                          axial_ligands=axial_ligands)
    n = flag_interfaces(rows, atoms, library, structure, checks["interface_cutoff_A"])
    if n:
        log.warning("%s: %d pigment(s) at an interface with an assembly copy the file lacks "
                    "(see their problems)", structure, n)
    log.info("%s: %d atoms after altloc policy '%s'; %d pigment(s), %d unsupported ligand(s)",
             structure, len(atoms), altloc, sum(r["status"] != "unsupported" for r in rows),
             sum(r["status"] == "unsupported" for r in rows))
    for r in rows:
        log.info("  %-14s %-11s %-14s %s", r["pigment_id"], r["status"], r["formula_qm"],
                 r["problems"])
    df = pd.DataFrame(rows, columns=INVENTORY_COLUMNS)
    io.write_tsv(out_tsv, df)
    if out_json:
        io.write_json(out_json, {"structure": str(structure), "altloc": altloc,
                                 "structure_checks": checks, "n_atoms": len(atoms),
                                 "pigments": rows})
    return rows


def find_pigment(atoms, library, pigment_id):
    pigs, _ = pigment_residues(atoms, library)
    for r in pigs:
        if r.id == pigment_id:
            return r
    raise StructureError(f"pigment {pigment_id} not found; present: {[p.id for p in pigs]}")


def model_record(model: QMModel, ptype, structure) -> dict:
    axes = {}
    for band, (a, b) in (ptype.band_axes or {}).items():
        if a in model.names and b in model.names:
            axes[band] = [model.index_of(a), model.index_of(b)]
    return {"pigment_id": model.pigment_id, "ccd_code": model.code, "structure": str(structure),
            "charge": model.charge, "multiplicity": model.multiplicity, "formula": model.formula,
            "n_atoms": len(model.elements), "elements": model.elements,
            "coords_A": np.round(model.coords, 6).tolist(), "names": model.names,
            "origin": model.origin, "dropped_atoms": model.dropped,
            "missing_atoms": model.missing, "rebuilt_atoms": model.rebuilt,
            "problems": model.problems, "band_axes": axes, "band_scheme": ptype.band_scheme,
            "nstates_default": ptype.nstates, "family": ptype.family,
            "metal_ligands": [{k: v for k, v in d.items() if k != "_atom"}
                              for d in model.ligands]}


def _write_atoms(ag, path):
    with io.atomic_target(path, suffix=Path(path).suffix) as tmp:
        ag.write(tmp)


def extract_stage(structure, pigment_id, out_xyz, out_model, out_cluster, library=None,
                  altloc=_ALTLOC, cutoff_A=_CUTOFF, overrides=None,
                  axial_ligands=default("extract.axial_ligands")):
    """QM model (XYZ + JSON record) and environment cluster (PDB) of one pigment.

    axial_ligands: add the groups coordinating the pigment's metal to the QM model (the
    library's axial_ligand_atoms); every donor within 2.6 Å is listed in the record's
    ``metal_ligands`` either way.
    """
    from ..structures.ligands import add_axial_ligands, metal_donors
    library = library or load_library()
    atoms = read_structure(structure, altloc)
    res = find_pigment(atoms, library, pigment_id)
    env = atoms[~np.isin(atoms.indices, res.atoms.indices)]
    model = model_for(res, library, overrides, env=env)
    if axial_ligands:
        ov = (overrides or {}).get(pigment_id, {})
        model = add_axial_ligands(model, library[res.code], env,
                                  fixed_state="charge" in ov or "multiplicity" in ov)
    else:
        model.ligands = [{**d, "in_qm": False, "note": "extract.axial_ligands is off"}
                         for d in metal_donors(model, env)]
    for d in model.ligands:
        log.info("%s: metal donor %s %s (%s) %.2f A: %s", pigment_id, d["residue"], d["atom"],
                 d["kind"], d["distance_A"], "in the QM model" if d["in_qm"] else d["note"])
    rec = model_record(model, library[res.code], structure)
    io.atomic_write_text(out_xyz, model.to_xyz())
    io.write_json(out_model, rec)
    near = atoms.select_atoms(f"byres (around {cutoff_A} group pig)", pig=res.atoms)
    cluster = res.atoms | near
    flag = np.isin(cluster.indices, res.atoms.indices).astype(float)
    try:
        cluster.tempfactors = flag
    except (AttributeError, ValueError):
        cluster.universe.add_TopologyAttr("tempfactors")
        cluster.tempfactors = flag
    _write_atoms(cluster, out_cluster)
    log.info("%s: QM model %s (%d atoms, charge %d, multiplicity %d; %d caps); cluster %d atoms "
             "in %d residues within %.1f A (pigment flagged with B-factor 1.00)",
             pigment_id, model.formula, len(model.elements), model.charge, model.multiplicity,
             model.origin.count("cap"), len(cluster), len(cluster.residues), cutoff_A)
    return rec


def measure_site(atoms, res, library, settings: EnvironmentSettings | None = None):
    """Metrics of one pigment residue in a structure: its QM-model heavy atoms (taken from the
    structure, tails cut as in the QM model) against every other heavy atom."""
    m = model_for(res, library)
    heavy = [i for i, (e, o) in enumerate(zip(m.elements, m.origin))
             if e != "H" and o == "structure"]
    env = environment_arrays(atoms, np.isin(atoms.indices, res.atoms.indices))
    return site_metrics(m.coords[heavy], [m.elements[i] for i in heavy], env,
                        settings or EnvironmentSettings())


def environment_stage(structure, model_json, out_json, settings: EnvironmentSettings,
                      model: DielectricModel, altloc=_ALTLOC, library=None):
    """Metrics of one site and its dielectric assignment (JSON)."""
    library = library or load_library()
    rec = io.read_json(model_json)
    atoms = read_structure(structure, altloc)
    res = find_pigment(atoms, library, rec["pigment_id"])
    mask = np.isin(atoms.indices, res.atoms.indices)
    env = environment_arrays(atoms, mask)
    heavy = [i for i, (e, o) in enumerate(zip(rec["elements"], rec["origin"]))
             if e != "H" and o == "structure"]
    coords = np.asarray(rec["coords_A"])[heavy]
    elements = [rec["elements"][i] for i in heavy]
    t0 = time.perf_counter()
    metrics = site_metrics(coords, elements, env, settings)
    diel = model.assign(rec["pigment_id"], metrics)
    out = {"pigment_id": rec["pigment_id"], "ccd_code": rec["ccd_code"], "metrics": metrics,
           "dielectric": diel, "environment_settings": asdict(settings),
           "dielectric_model": asdict(model), "time_s": round(time.perf_counter() - t0, 3)}
    io.write_json(out_json, out)
    log.info("%s: eps_static=%.3f eps_optical=%.3f (%s); burial %.2f, hydropathy %.2f, "
             "%d polar atoms, %d charged groups, %d waters", rec["pigment_id"],
             diel["eps_static"], diel["eps_optical"], diel["source"], metrics["burial"],
             metrics["hydropathy"], metrics["n_polar_atoms"], metrics["n_charged_groups"],
             metrics["n_waters"])
    return out


def tune_stage(model_json, out_json, settings: ExciteSettings, xatol=None, bounds=None,
               include_anion=None, out_orbitals=None):
    """Gas-phase optimal tuning of ω for one pigment type; out_orbitals: where the neutral's
    orbitals at the tuned ω are kept for the warm starts of the sites (:func:`tuning_orbitals`).
    """
    rec = io.read_json(model_json)
    log.info("tuning omega for %s on %s (%s, alpha=%.3f, gas phase)", rec["ccd_code"],
             rec["pigment_id"], settings.basis, settings.alpha)
    res = tune_omega(rec["elements"], rec["coords_A"], rec["charge"], rec["multiplicity"] - 1,
                     settings, bounds=bounds, xatol=xatol, include_anion=include_anion,
                     log=log.info, keep_orbitals=out_orbitals is not None)
    res.update(ccd_code=rec["ccd_code"], tuned_on=rec["pigment_id"])
    if out_orbitals is not None:
        w, neutral = res.pop("_neutral")
        save_orbitals(out_orbitals, neutral, rec["elements"], rec["coords_A"], settings.basis,
                      f"gas-phase tuning of {rec['ccd_code']} on {rec['pigment_id']} "
                      f"(omega {w:.4f} bohr^-1)")
    if res["at_bound"]:
        log.warning("tuned omega %.4f lies at the search bound %s; widen qm.tune.bounds",
                    res["omega_bohr_inv"], res["bounds_bohr_inv"])
    io.write_json(out_json, res)
    log.info("tuned omega = %.4f bohr^-1 (J = %.4f eV) after %d evaluations in %.1f s",
             res["omega_bohr_inv"], res["j_ev"], res["n_evaluations"], res["time_s"])
    return res


class _hash_lock:
    """Exclusive lock on a cache entry, so two jobs with the same QM inputs compute it once
    (the second waits and then reuses the first's result)."""

    def __init__(self, cached):
        self.path = None if cached is None else Path(str(cached) + ".lock")

    def __enter__(self):
        if self.path is not None:
            import fcntl
            self.path.parent.mkdir(parents=True, exist_ok=True)
            self.fh = open(self.path, "w")
            fcntl.flock(self.fh, fcntl.LOCK_EX)
        return self

    def __exit__(self, *exc):
        if self.path is not None:
            import fcntl
            fcntl.flock(self.fh, fcntl.LOCK_UN)
            self.fh.close()
        return False


def study_omega(qm: dict, tuning_json=None):
    """ω (bohr⁻¹) of a QM job: the tuned one when a tuning result is given, else the
    configured `qm.omega` (None: the preset's fallback)."""
    return io.read_json(tuning_json)["omega_bohr_inv"] if tuning_json else qm.get("omega")


def site_settings(rec: dict, dielectric: dict, qm: dict, tuning_json=None) -> ExciteSettings:
    """The continuum-only QM settings of one site: the config's `qm` section, the site's ε and
    the tuned ω (or the configured one)."""
    from .config import qm_settings
    omega = study_omega(qm, tuning_json)
    settings = qm_settings(qm, dielectric["eps_static"], dielectric["eps_optical"], omega,
                           rec.get("nstates_default"))
    if qm.get("gas_phase"):
        settings.eps_static = settings.eps_optical = 1.0
    return settings


#: settings that change how a job runs but not its numbers: left out of the QM cache key
RUN_ONLY_SETTINGS = tuple(k for k in RUN_ONLY_QM_KEYS if k != "threads")


def qm_key(rec: dict, settings: ExciteSettings, charges=None) -> dict:
    """Everything that changes a QM result: atoms, coordinates, charge, spin, band axes, the
    settings (less RUN_ONLY_SETTINGS), the embedding charges, and the code and PySCF versions."""
    import pyscf

    from .. import __version__
    s = {k: v for k, v in asdict(settings).items() if k not in RUN_ONLY_SETTINGS}
    key = {"elements": rec["elements"], "coords_A": rec["coords_A"], "charge": rec["charge"],
           "multiplicity": rec["multiplicity"], "band_axes": rec["band_axes"], "settings": s,
           "versions": {"siteshift": __version__, "pyscf": pyscf.__version__}}
    if charges is not None and len(charges):
        key["charges"] = charges.key()
    return key


def _save_arrays(path, **arrays):
    """np.savez written atomically (a killed job leaves no half file)."""
    with io.atomic_target(path, suffix=".npz") as tmp:
        np.savez(tmp, **arrays)


def response_path(cached_json):
    """Where the orbitals, amplitudes and relaxed densities of a cached result are kept."""
    return Path(cached_json).with_suffix(".response.npz")


def tuning_orbitals(tuning_json):
    """Where the tuning job keeps the neutral's orbitals (None without tuning)."""
    return Path(tuning_json).with_suffix(".orbitals.npz") if tuning_json else None


def site_start(rec: dict, settings: ExciteSettings, tuning_json=None, density=None,
               source=None, same_site=None, cache_dir=None, orbitals=None):
    """A callable giving (dm0, record) of a site's SCF: ``density`` (an AO density of this very
    geometry and basis, e.g. the site's continuum-only ground state, named by ``source``) when
    its file exists; else ``orbitals`` (converged on another geometry or ε of this model, in
    :func:`carried_start`'s layout); else the orbitals of the same site computed in another
    variant (``same_site``: that site's excited_states.json, its orbitals read from the cache),
    carried to this geometry; else the tuning job's gas-phase orbitals carried to the site's
    geometry (:func:`siteshift.qm.warmstart.warm_density`); else a cold start. Evaluated only
    when the SCF runs (a cached result needs none)."""
    def start():
        if density is not None and Path(density).exists():
            return np.load(density), {"kind": "warm", "source": source or str(density),
                                      "rmsd_A": 0.0}
        mol = build_molecule(rec["elements"], rec["coords_A"], rec["charge"],
                             rec["multiplicity"] - 1, settings.basis, settings.max_memory_mb)
        tried = []

        def candidates():   # the same site's file is read only when the first does not fit
            yield orbitals     # in memory (e.g. a sweep's previous point)
            if same_site is not None:
                yield _site_orbitals(same_site, cache_dir)
        for saved in candidates():
            if saved is not None:
                dm, how = carried_start(mol, saved, rec["elements"], rec["coords_A"],
                                        settings.basis)
                if dm is not None:
                    return dm, how
                tried.append(f"{saved['source']}: {how['reason']}")
        dm, how = warm_density(mol, tuning_orbitals(tuning_json), rec["elements"],
                               rec["coords_A"], settings.basis)
        if tried and dm is None:
            how["reason"] = "; ".join(tried + [how["reason"]])
        return dm, how
    return start


def _site_orbitals(result_json, cache_dir):
    """The converged orbitals of a computed site (its cached response arrays) with the atoms,
    coordinates and basis they belong to, in :func:`carried_start`'s layout; None when the
    cache does not hold them."""
    result_json = Path(result_json)
    if cache_dir is None or not result_json.exists():
        return None
    res = io.read_json(result_json)
    arrays = load_response(Path(cache_dir) / f"{res.get('qm_hash')}.json")
    model = result_json.parent / "qm_model.json"
    if arrays is None or "mo_coeff" not in arrays or not model.exists():
        return None
    rec = io.read_json(model)
    return {"mo_coeff": arrays["mo_coeff"], "mo_occ": arrays["mo_occ"],
            "elements": rec["elements"], "coords_A": np.asarray(rec["coords_A"]),
            "basis": res["basis"],
            "source": f"{res.get('pigment_id')} of variant {res.get('variant')} "
                      f"({res.get('qm_hash')})"}


def cached_excite(rec: dict, settings: ExciteSettings, cache_dir=None, charges=None,
                  relaxed=False, label=None, start=None):
    """(result, hash, response arrays or None) of one QM job, computed or reused from the cache.

    relaxed: the response arrays must hold the relaxed difference densities of the named bands
    (a cached result without them is recomputed, starting from its ground-state density).
    start: a callable giving (dm0, record) of the SCF's start (:func:`site_start`); the start
    is not part of the cache key (it changes the path, not the result)."""
    label = label or rec["pigment_id"]
    h = io.stable_hash(qm_key(rec, settings, charges))
    cached = Path(cache_dir) / f"{h}.json" if cache_dir else None
    with _hash_lock(cached):
        dm0, how = None, None
        if cached is not None and cached.exists():
            arrays = load_response(cached)
            if not relaxed or (arrays is not None and
                               any(k.startswith("relaxed_") for k in arrays)):
                result = io.read_json(cached)
                log.info("%s: QM inputs unchanged (hash %s); reusing %s", label, h, cached)
                result["cache"] = "reused"
                # band names follow today's rules, not those of the run that computed them
                result["band_warnings"] = assign_bands(
                    result["states"], np.asarray(rec["coords_A"]), rec["band_axes"] or None,
                    scheme=rec.get("band_scheme"))
                return result, h, arrays
            log.info("%s: cached result %s lacks relaxed densities; recomputing", label, h)
            if density_path(cached).exists():
                dm0 = np.load(density_path(cached))
                how = {"kind": "warm", "source": f"cached result {h} (without relaxed densities)",
                       "rmsd_A": 0.0}
        if dm0 is None and start is not None:
            dm0, how = start()
        how = how or {"kind": "cold", "reason": "no start given"}
        log.info("%s: SCF start %s%s", label, how["kind"],
                 f" from {how['source']}" if how["kind"] == "warm" else
                 f" ({how.get('reason')})")
        log.info("%s: SRSH-PCM %s, eps_static=%.3f eps_optical=%.3f screen=%s omega=%.4f "
                 "alpha=%.2f, %d states%s (hash %s)", label, settings.basis,
                 settings.eps_static, settings.eps_optical, settings.screen, settings.omega,
                 settings.alpha, settings.nstates,
                 "" if charges is None else f", {len(charges)} embedding charges", h)
        result = excite(rec["elements"], rec["coords_A"], rec["charge"], rec["multiplicity"] - 1,
                        settings, log=log.info, band_axes=rec["band_axes"] or None,
                        band_scheme=rec.get("band_scheme"),
                        keep_density=True, dm0=dm0, charges=charges, keep_response=True,
                        relaxed=relaxed, start=how)
        result["cache"] = "computed"
        dm = result.pop("_dm")
        arrays = result.pop("_response", None)
        if cached is not None:
            cached.parent.mkdir(parents=True, exist_ok=True)
            np.save(density_path(cached), np.asarray(dm))
            if arrays is not None:
                _save_arrays(response_path(cached), **arrays)
            io.write_json(cached, result)   # last: the entry counts once its JSON exists
    return result, h, arrays


def load_response(cached):
    """The response arrays of a cached result (dict of arrays), or None."""
    path = response_path(cached)
    if not path.exists():
        return None
    with np.load(path) as z:
        return {k: z[k] for k in z.files}


def excite_stage(model_json, environment_json, out_json, qm: dict, tuning_json=None,
                 cache_dir=None, variant=None, relaxed=False, same_site=None):
    """Excited states of one pigment (continuum only); results are cached by a hash of every
    QM input (:func:`qm_key`). relaxed: keep the relaxed difference densities of the named
    bands too (the electrostatics stage decomposes shifts with them). same_site: the same
    pigment's result in the reference variant, whose orbitals start this SCF
    (``qm.warm_start: reference``; else the tuning orbitals do)."""
    rec = io.read_json(model_json)
    diel = io.read_json(environment_json)["dielectric"]
    settings = site_settings(rec, diel, qm, tuning_json)
    result, h, _arrays = cached_excite(rec, settings, cache_dir, relaxed=relaxed,
                                       start=site_start(rec, settings, tuning_json,
                                                        same_site=same_site,
                                                        cache_dir=cache_dir))
    result.update(pigment_id=rec["pigment_id"], ccd_code=rec["ccd_code"], variant=variant,
                  qm_hash=h, dielectric_source=diel["source"], mode="continuum",
                  tuning=str(tuning_json) if tuning_json else "fixed",
                  geometry=geometry_note(rec))
    io.write_json(out_json, result)
    for s in result["states"]:
        log.info("  S%d %.4f eV %.1f nm f=%.4f %s", s["index"], s["energy_ev"],
                 s["wavelength_nm"], s["oscillator_strength"], s["band"] or "")
    return result


def density_path(cached_json):
    """Where the ground-state density of a cached excited-state result is kept (.npy)."""
    return Path(cached_json).with_suffix(".dm.npy")
