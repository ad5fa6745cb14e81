"""First-order mutation scan of a site: the predicted shift of single mutations without new QM."""
from __future__ import annotations

import logging
import time

import numpy as np
import pandas as pd

from ..base import io
from ..base.defaults import default, fill
from ..base.units import EV2CM1, HARTREE2EV
from ..environment.charges import assign_charges
from ..qm.embedding import first_order_shifts
from ..qm.scf import build_molecule
from ..structures.reading import AMINO_ACIDS as AMINO_ACIDS_SET
from .electrostatics import charge_settings, site_point_charges

log = logging.getLogger("siteshift")

SCAN_COLUMNS = ["variant", "pigment_id", "band", "mutation", "kind", "predicted_shift_mev",
                "predicted_shift_cm1", "residue_before_mev", "residue_after_mev",
                "closest_contact_A", "status"]


def _site_shifts(charges, rec, el, diel, mol, P):
    """(total first-order shift meV, per-residue Series) of one charge table."""
    pc, _notes = site_point_charges(charges, rec, el, diel)
    de = first_order_shifts(mol, P, pc) * HARTREE2EV * 1000.0
    per = pd.Series(de).groupby(pd.Series(pc.labels)).sum()
    return float(de.sum()), per


def scan_candidates(atoms, pigment_id, radius_A, to) -> list:
    """Mutations CHAIN:XnY of every amino acid with an atom within radius_A of the pigment to
    each one-letter residue in `to` (its own type skipped)."""
    from ..structures.mutate import ONE_TO_THREE
    from ..structures.pairing import THREE_TO_ONE
    out = []
    for (ch, resname, resid, icode) in residues_near(atoms, pigment_id, radius_A):
        wt = THREE_TO_ONE.get(resname)
        if wt is None:
            continue
        out += [f"{ch}:{wt}{resid}{icode}{x}" for x in to if x != wt and x in ONE_TO_THREE]
    return out


def residues_near(atoms, pigment_id, radius_A):
    """(chain, resname, resid, icode) of amino acids within radius_A of a pigment's atoms."""
    from ..structures.reading import residues_of
    res = residues_of(atoms)
    pig = next((r for r in res if r.id == pigment_id), None)
    if pig is None or radius_A <= 0:
        return []
    X = pig.atoms.positions
    out = []
    for r in res:
        if r.code not in AMINO_ACIDS_SET:
            continue
        d = np.min(np.linalg.norm(r.atoms.positions[:, None, :] - X[None], axis=-1))
        if d <= radius_A:
            out.append((r.chain, r.code, r.resid, r.icode))
    return out


def scan_stage(structure, charges_tsv, embedded_json, model_json, environment_json, out_json,
               library, pigment_charge_files, el, cache_dir, variant_charges=None,
               altloc=None, workdir=None):
    """Predicted first-order shift of single mutations of one site (no new QM).

    Each mutant is built as the workflow builds in-silico variants (PDBFixer side chain, χ1/χ2
    search; :func:`siteshift.structures.mutate.mutate`), charged as the structure is, and the
    shift is Σ_J q'_J φ(R'_J) − Σ_J q_J φ(R_J) with φ the potential of the site's relaxed
    difference density (the continuum-only reference's). variant_charges: {variant: charges
    TSV} of the study's other variants, predicted the same way (the table compares them with
    their computed shifts)."""
    import tempfile
    from pathlib import Path

    from ..structures.mutate import MutationError, mutate
    from ..structures.reading import read_structure
    from .stages import load_response
    el = fill(el, "electrostatics")
    rec = io.read_json(model_json)
    diel = io.read_json(environment_json)["dielectric"]
    emb = io.read_json(embedded_json)
    h_ref = emb["electrostatics"]["reference_qm_hash"]
    arrays = load_response(Path(cache_dir) / f"{h_ref}.json")
    if arrays is None:
        raise FileNotFoundError(f"{rec['pigment_id']}: the reference calculation {h_ref} has no "
                                f"response arrays in {cache_dir}; rerun the embedded stage")
    mol = build_molecule(rec["elements"], rec["coords_A"], rec["charge"],
                         rec["multiplicity"] - 1, emb["basis"])
    base = pd.read_csv(charges_tsv, sep="\t", keep_default_na=False)
    fits = {io.read_json(f)["ccd_code"]: io.read_json(f) for f in pigment_charge_files}
    atoms = read_structure(structure, altloc or default("altloc"))
    scan = el["scan"]
    muts = list(scan["mutations"]) + scan_candidates(atoms, rec["pigment_id"],
                                                     float(scan["radius_A"]), scan["to"])
    muts = list(dict.fromkeys(muts))
    bands = {b: v["reference_state"] for b, v in emb["electrostatics"]["bands"].items()}
    rows = []
    t0 = time.perf_counter()
    base_tot = {}
    for band, idx in bands.items():
        key = f"relaxed_{idx}"
        if key in arrays:
            base_tot[band] = _site_shifts(base, rec, el, diel, mol, arrays[key])
    tmpdir = Path(workdir or tempfile.mkdtemp(prefix="siteshift-scan-"))
    tmpdir.mkdir(parents=True, exist_ok=True)
    for k, m in enumerate(muts, start=1):
        pdb = tmpdir / f"mut{k}.pdb"
        try:
            rep = mutate(structure, [m], pdb)
            mut_atoms = read_structure(pdb, altloc or default("altloc"))
            charges, _r = assign_charges(mut_atoms, library, fits, charge_settings(el))
        except (MutationError, ValueError) as exc:
            rows.append({"pigment_id": rec["pigment_id"], "mutation": m, "kind": "scan",
                         "status": f"not built: {exc}"})
            continue
        chain, rest = m.split(":", 1)
        num = int("".join(c for c in rest[1:-1] if c.isdigit() or c == "-"))
        for band, (tot0, per0) in base_tot.items():
            tot, per = _site_shifts(charges, rec, el, diel, mol, arrays[f"relaxed_{bands[band]}"])
            before = float(per0[[r for r in per0.index if _is_res(r, chain, num)]].sum())
            after = float(per[[r for r in per.index if _is_res(r, chain, num)]].sum())
            rows.append({"pigment_id": rec["pigment_id"], "band": band, "mutation": m,
                         "kind": "scan", "predicted_shift_mev": tot - tot0,
                         "predicted_shift_cm1": (tot - tot0) / 1000.0 * EV2CM1,
                         "residue_before_mev": before, "residue_after_mev": after,
                         "closest_contact_A": rep["closest_A"].get(m), "status": "ok"})
        log.info("scan %s %s: %s (%d/%d, %.1f s)", rec["pigment_id"], m,
                 ", ".join(f"{r['band']} {r['predicted_shift_mev']:+.2f} meV" for r in rows
                           if r.get("mutation") == m and r.get("band")), k, len(muts),
                 time.perf_counter() - t0)
    for v, tsv in (variant_charges or {}).items():
        charges = pd.read_csv(tsv, sep="\t", keep_default_na=False)
        for band, (tot0, _per0) in base_tot.items():
            try:
                tot, _per = _site_shifts(charges, rec, el, diel, mol,
                                         arrays[f"relaxed_{bands[band]}"])
            except (KeyError, ValueError) as exc:
                rows.append({"pigment_id": rec["pigment_id"], "band": band, "mutation": v,
                             "kind": "variant", "status": f"not predicted: {exc}"})
                continue
            rows.append({"pigment_id": rec["pigment_id"], "band": band, "mutation": v,
                         "kind": "variant", "predicted_shift_mev": tot - tot0,
                         "predicted_shift_cm1": (tot - tot0) / 1000.0 * EV2CM1,
                         "status": "ok"})
    out = {"pigment_id": rec["pigment_id"], "variant": emb["variant"], "rows": rows,
           "n_mutations": len(muts), "time_s": round(time.perf_counter() - t0, 2),
           "reference_qm_hash": h_ref}
    io.write_json(out_json, out)
    return out


def _is_res(key, chain, num):
    """Whether a residue key (``A:GLU6``) names the amino acid at chain:num."""
    ch, rest = key.split(":", 1)
    return ch == chain and rest[:3] in AMINO_ACIDS_SET and \
        rest[3:].rstrip("ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz") == str(num)
