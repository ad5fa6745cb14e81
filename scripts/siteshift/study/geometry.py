"""The geometry stage (extract.geometry): a pigment type's gas-phase reference geometry and
the coordinates each site is computed on (:mod:`siteshift.qm.geometry` for the methods)."""
from __future__ import annotations

import logging

import numpy as np

from ..base import io
from ..base.defaults import fill
from ..structures.library import load_library

log = logging.getLogger("siteshift")


def geometry_note(rec: dict) -> dict:
    """What a site's coordinates are (extract.geometry) and how far from the crystal."""
    g = rec.get("geometry") or {}
    return {"mode": g.get("mode", "crystal"), "level": g.get("level"),
            "rmsd_heavy_A": float(g.get("rmsd_heavy_A", 0.0)),
            "reference": g.get("reference")}


def _record_xyz(rec: dict) -> str:
    from ..structures.qmmodel import xyz_text
    return xyz_text(f"{rec['pigment_id']} {rec['ccd_code']} charge={rec['charge']} "
                    f"multiplicity={rec['multiplicity']} formula={rec['formula']} "
                    f"geometry={rec.get('geometry', {}).get('mode', 'crystal')}",
                    rec["elements"], rec["names"], rec["coords_A"])


def _geometry_level_settings(level, qm):
    """The preset's gas-phase settings for a dft-level optimisation (untuned ω unless given)."""
    if level != "dft":
        return None
    from .config import qm_settings
    return qm_settings(qm or {}, 1.0, 1.0, (qm or {}).get("omega"))


def type_geometry_stage(crystal_json, out_json, geometry: dict, qm: dict | None = None):
    """One pigment type's reference geometry: the reference variant's first copy of the type
    (its QM model as extracted) optimised in the gas phase at extract.geometry_level."""
    from ..qm.geometry import optimise
    geometry = fill(geometry, "extract")
    rec = io.read_json(crystal_json)
    level = geometry["geometry_level"]
    x, opt = optimise(rec["elements"], rec["coords_A"], rec["charge"], rec["multiplicity"],
                      level, _geometry_level_settings(level, qm),
                      max_steps=geometry["geometry_steps"],
                      label=f"{rec['ccd_code']} type reference ({rec['pigment_id']})")
    out = {"ccd_code": rec["ccd_code"], "pigment_id": rec["pigment_id"],
           "structure": rec["structure"], "names": rec["names"], "elements": rec["elements"],
           "charge": rec["charge"], "multiplicity": rec["multiplicity"],
           "coords_A": np.round(x, 6).tolist(), "optimisation": opt}
    io.write_json(out_json, out)
    return out


def place_geometry_stage(crystal_json, out_xyz, out_model, geometry: dict, reference_json=None,
                         library=None, qm: dict | None = None):
    """The QM model a site is computed on (extract.geometry): the type reference superposed on
    the copy's core (type_reference) or the copy relaxed with its heavy atoms restrained
    (relaxed); the record notes the mode, level and RMSD to the crystal."""
    from ..qm.geometry import optimise, superpose_reference
    geometry = fill(geometry, "extract")
    mode, level = geometry["geometry"], geometry["geometry_level"]
    rec = io.read_json(crystal_json)
    crystal = np.asarray(rec["coords_A"], float)
    heavy = [i for i, e in enumerate(rec["elements"]) if e != "H"]
    info = {"mode": mode, "level": level}
    if mode == "type_reference":
        library = library or load_library()
        ref = io.read_json(reference_json)
        x, fit = superpose_reference(ref, rec, library[rec["ccd_code"]].core)
        info.update(fit, reference=ref["pigment_id"], reference_file=str(reference_json))
    elif mode == "relaxed":
        x, opt = optimise(rec["elements"], crystal, rec["charge"], rec["multiplicity"], level,
                          _geometry_level_settings(level, qm), restrain=heavy,
                          restraint_kcal_mol_A2=geometry["restraint_kcal_mol_A2"],
                          max_steps=geometry["geometry_steps"],
                          label=f"{rec['pigment_id']} relaxed")
        info.update(optimisation=opt)
    else:
        x = crystal
    info["rmsd_heavy_A"] = float(np.sqrt(((x - crystal)[heavy] ** 2).sum(1).mean()))
    bonds = _bond_change(rec["elements"], crystal, x)
    info.update(bonds)
    log.info("%s: geometry %s (%s): heavy-atom RMSD to the crystal %.3f A; heavy-atom bond "
             "lengths changed by %.3f A RMS, %.3f A at most", rec["pigment_id"], mode, level,
             info["rmsd_heavy_A"], bonds["bond_change_rms_A"], bonds["bond_change_max_A"])
    out = {**rec, "coords_A": np.round(x, 6).tolist(), "geometry": info}
    io.atomic_write_text(out_xyz, _record_xyz(out))
    io.write_json(out_model, out)
    return out


def _bond_change(elements, a, b, cut_A=1.9) -> dict:
    """RMS and largest change of heavy-atom bond lengths (pairs closer than cut_A in a)."""
    heavy = [i for i, e in enumerate(elements) if e != "H"]
    A, B = np.asarray(a)[heavy], np.asarray(b)[heavy]
    da = np.linalg.norm(A[:, None] - A[None], axis=-1)
    db = np.linalg.norm(B[:, None] - B[None], axis=-1)
    iu = np.triu_indices(len(heavy), 1)
    bonded = da[iu] < cut_A
    d = (db[iu] - da[iu])[bonded]
    if not len(d):
        return {"bond_change_rms_A": 0.0, "bond_change_max_A": 0.0}
    return {"bond_change_rms_A": float(np.sqrt((d ** 2).mean())),
            "bond_change_max_A": float(np.abs(d).max())}
