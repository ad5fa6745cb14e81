"""Inventory: every pigment in a structure, its QM model summary and any problem found."""
from __future__ import annotations

import numpy as np

from .qmmodel import ModelError, build_qm_model
from .reading import classify, residues_of

INVENTORY_COLUMNS = ["pigment_id", "ccd_code", "chain", "resid", "icode", "status", "n_atoms_read",
                     "n_heavy_read", "n_atoms_qm", "formula_qm", "charge", "multiplicity",
                     "problems"]


def pigment_residues(atoms, library):
    """(pigments, unsupported): Residue objects of library pigments and of unknown ligands."""
    pigs, unsup = [], []
    for r in residues_of(atoms):
        kind = classify(r.code, library)
        if kind == "pigment":
            pigs.append(r)
        elif kind == "unsupported" and _is_het(r):
            unsup.append(r)
    return pigs, unsup


def _is_het(res) -> bool:
    if hasattr(res.atoms, "record_types"):
        return bool(np.any(np.asarray(res.atoms.record_types) == "HETATM"))
    return True


def model_for(res, library, overrides=None):
    ov = (overrides or {}).get(res.id, {})
    ptype = library[res.code]
    return build_qm_model(res.id, res.code, list(res.atoms.names), list(res.atoms.elements)
                          if hasattr(res.atoms, "elements") else list(res.atoms.types),
                          res.atoms.positions, ptype, charge=ov.get("charge"),
                          multiplicity=ov.get("multiplicity"))


def take_inventory(atoms, library, overrides=None):
    """A list of row dicts (see INVENTORY_COLUMNS), pigments first, then unsupported ligands."""
    pigs, unsup = pigment_residues(atoms, library)
    rows = []
    for r in pigs:
        elems = np.asarray(r.atoms.elements).astype(str) if hasattr(r.atoms, "elements") else \
            np.asarray(r.atoms.types).astype(str)
        row = {"pigment_id": r.id, "ccd_code": r.code, "chain": r.chain, "resid": r.resid,
               "icode": r.icode, "n_atoms_read": len(r.atoms),
               "n_heavy_read": int(np.sum(~np.isin(np.char.upper(elems), ["H", "D"])))}
        try:
            m = model_for(r, library, overrides)
            row.update(status="ok", n_atoms_qm=len(m.elements), formula_qm=m.formula,
                       charge=m.charge, multiplicity=m.multiplicity,
                       problems="; ".join(m.problems))
        except ModelError as exc:
            row.update(status="error", n_atoms_qm=0, formula_qm="", charge=None,
                       multiplicity=None, problems=str(exc))
        rows.append(row)
    for r in unsup:
        rows.append({"pigment_id": r.id, "ccd_code": r.code, "chain": r.chain, "resid": r.resid,
                     "icode": r.icode, "status": "unsupported", "n_atoms_read": len(r.atoms),
                     "n_heavy_read": len(r.atoms), "n_atoms_qm": 0, "formula_qm": "",
                     "charge": None, "multiplicity": None,
                     "problems": f"{r.code} is not in the pigment library; add an entry under "
                                 "`pigments:` in the study config to include it"})
    return rows
