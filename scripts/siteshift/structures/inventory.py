"""Inventory: every pigment in a structure, its QM model summary and any problem found."""
from __future__ import annotations

import numpy as np

from .ligands import _joins_qm, add_link, find_link, ligation_key, metal_donors
from .qmmodel import ModelError, build_qm_model
from .reading import classify, is_amino_acid, residues_of

INVENTORY_COLUMNS = ["pigment_id", "ccd_code", "chain", "resid", "icode", "status", "n_atoms_read",
                     "n_heavy_read", "n_atoms_qm", "formula_qm", "charge", "multiplicity",
                     "altlocs", "rebuilt_atoms", "min_contact_A", "metal_donors",
                     "donors_outside_qm", "assembly_interface", "problems"]

#: heavy atoms of a pigment and of its environment closer than this (Å) clash: two conformer
#: states mixed, or a misplaced atom (common practice: non-bonded heavy-atom contacts in
#: refined structures stay above ~2.5-3 Å; 2.2 Å leaves room for short hydrogen bonds)
CLASH_A = 2.2
CLASH_ACTIONS = ("error", "warn")
#: environment atoms bonded to a pigment by design (covalent links, metal coordination): their
#: short distances to the pigment are not clashes when at least LINK_MIN_A apart
LINK_ATOMS = {("CYS", "SG"), ("LYS", "NZ"), ("HIS", "NE2"), ("HIS", "ND1"), ("MET", "SD")}
LINK_MIN_A = 1.2
#: a backbone C or N of an amino acid this close to a pigment atom is a peptide bond (in-chain
#: chromophores), not a clash (C–N peptide bond 1.33 Å; common practice)
PEPTIDE_MAX_A = 1.5


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


def model_for(res, library, overrides=None, env=None):
    """The QM model of a pigment residue; env (everything else, an AtomGroup): where a covalent
    link of the library entry is found (retinal–Lys Schiff base, chromophore–Cys thioester), the
    linked residue's atoms join the model, cut and capped, with the link's charge."""
    ov = (overrides or {}).get(res.id, {})
    ptype = library[res.code]
    link, partner = find_link(ptype, res.atoms, env) if env is not None else (None, None)
    m = build_qm_model(res.id, res.code, list(res.atoms.names), list(res.atoms.elements)
                       if hasattr(res.atoms, "elements") else list(res.atoms.types),
                       res.atoms.positions, ptype, charge=ov.get("charge"),
                       multiplicity=ov.get("multiplicity"), check_spin=link is None,
                       replaced=link["replaces"] if link else (),
                       drop_h=link["drop_h"] if link else ())
    if link:
        m = add_link(m, link, partner, env, fixed_state="charge" in ov)
    return m


def _elements(ag):
    return np.char.capitalize(np.char.strip(np.asarray(
        ag.elements if hasattr(ag, "elements") else ag.types).astype(str)))


def heavy_index(atoms):
    """(heavy atoms, KD-tree of their positions) of a structure: built once per inventory and
    shared by every pigment's clash check."""
    from scipy.spatial import cKDTree
    heavy = atoms[~np.isin(_elements(atoms), ["H", "D"])]
    return heavy, cKDTree(heavy.positions)


def clashes(atoms, res, clash_A=CLASH_A, index=None):
    """Heavy-atom pairs of a pigment residue and everything else closer than clash_A:
    [(pigment atom, other residue and atom, distance Å)] plus the closest such distance (None if
    no heavy atom is within 4 Å). The pigment's metal and the link atoms of LINK_ATOMS (at least
    LINK_MIN_A away) are exempt: their short bonds are chemistry. index: :func:`heavy_index` of
    `atoms` (built here if not given)."""
    from .ligands import METALS
    heavy, tree = index or heavy_index(atoms)
    own = np.isin(heavy.indices, res.atoms.indices)
    pig = heavy[own & ~np.isin(_elements(heavy), list(METALS))]
    out, closest = [], None
    for p, hits in zip(pig, tree.query_ball_point(pig.positions, 4.0)):
        for h in hits:
            if own[h]:
                continue
            o = heavy[h]
            dist = float(np.linalg.norm(o.position - p.position))
            closest = dist if closest is None else min(closest, dist)
            if dist >= clash_A:
                continue
            if (str(o.resname).upper(), str(o.name)) in LINK_ATOMS and dist >= LINK_MIN_A:
                continue
            if str(o.name) in ("C", "N") and LINK_MIN_A <= dist <= PEPTIDE_MAX_A and \
                    is_amino_acid(str(o.resname).upper()):
                continue      # the peptide bond of an in-chain chromophore
            ch = str(getattr(o, "chainID", "") or o.segid).strip() or "_"
            alt = str(getattr(o, "altLoc", "") or "").strip()
            out.append((str(p.name), f"{ch}:{o.resname}{o.resid} {o.name}"
                        + (f" (altloc {alt})" if alt else ""), round(dist, 2)))
    out.sort(key=lambda c: c[2])
    return out, (out[0][2] if out else closest)


def outside_donors(donors, ptype, axial_ligands=True) -> list[dict]:
    """The metal donors that stay outside the QM model (extract.axial_ligands off, or no
    fragment rule for them: backbone carbonyls, formyl-Met, other ligands): their atoms then act
    on the site as point charges about 2 Å from the metal, a shift of tens to hundreds of meV
    that is an artefact of the cut, not a prediction."""
    return [d for d in donors if not (axial_ligands and _joins_qm(
        ptype.axial_ligand_atoms or {}, str(d["_atom"].resname).upper(), d["atom"]))]


def take_inventory(atoms, library, overrides=None, altlocs=None, clash_A=CLASH_A,
                   on_clash="error", rebuild_missing=True, axial_ligands=True):
    """A list of row dicts (see INVENTORY_COLUMNS), pigments first, then unsupported ligands.

    altlocs: read_structure's report (which conformer each pigment kept); clash_A / on_clash:
    heavy-atom contacts of a pigment with its environment closer than clash_A make the pigment
    an error ("error") or a problem noted ("warn"); rebuild_missing: atoms of the QM model
    missing from the structure are rebuilt from the CCD (True) or the pigment is "partial" and
    not computed (False); either way every copy of a type has the same QM formula.
    axial_ligands: as extract.axial_ligands (which metal donors will join the QM model); the
    others are listed in ``donors_outside_qm`` and noted as a problem.
    """
    if on_clash not in CLASH_ACTIONS:
        raise ValueError(f"on_clash {on_clash!r} not one of {CLASH_ACTIONS}")
    pigs, unsup = pigment_residues(atoms, library)
    index = heavy_index(atoms) if pigs else None
    rows = []
    for r in pigs:
        elems = _elements(r.atoms)
        alt = (altlocs or {}).get(r.id, {})
        row = {"pigment_id": r.id, "ccd_code": r.code, "chain": r.chain, "resid": r.resid,
               "icode": r.icode, "n_atoms_read": len(r.atoms),
               "n_heavy_read": int(np.sum(~np.isin(elems, ["H", "D"]))),
               "altlocs": alt.get("altlocs", ""), "rebuilt_atoms": "",
               "assembly_interface": ""}
        notes = []
        if alt.get("dropped_atoms"):
            notes.append(f"altloc {alt['altlocs']} kept; {alt['dropped_atoms']} neighbour "
                         f"atom(s) present only in state(s) {alt['rejected'] or 'other'} "
                         "dropped")
        found, closest = clashes(atoms, r, clash_A, index)
        row["min_contact_A"] = None if closest is None else round(closest, 2)
        clash = ""
        if found:
            shown = ", ".join(f"{a}-{o} {d:.2f} A" for a, o, d in found[:3])
            clash = (f"clash: {len(found)} heavy-atom contact(s) under {clash_A} A ({shown}"
                     f"{', ...' if len(found) > 3 else ''}); two conformer states mixed or an "
                     "atom misplaced: try another altloc policy, or fix the structure")
        env = atoms[~np.isin(atoms.indices, r.atoms.indices)]
        try:
            m = model_for(r, library, overrides, env=env)
            status = "ok"
            if m.rebuilt and not rebuild_missing:
                status = "partial"
                notes.append(f"atom(s) {m.rebuilt} missing from the structure (partial "
                             "pigment); not computed (structure_checks.rebuild_missing: false)")
            if clash and on_clash == "error":
                status = "error"
            donors = metal_donors(m, env)
            row["metal_donors"] = ", ".join(f"{d['residue']} {d['atom']} {d['distance_A']:.2f}"
                                            for d in donors)
            outside = outside_donors(donors, library[r.code], axial_ligands)
            row["donors_outside_qm"] = ", ".join(
                f"{d['residue']} {d['atom']} ({d['kind']}) {d['distance_A']:.2f}"
                for d in outside)
            if outside:
                notes.append(
                    f"metal donor(s) {row['donors_outside_qm']} A stay outside the QM model "
                    "and act as point charges at bonding distance of the metal (an artefact "
                    "of tens to hundreds of meV); "
                    + ("turn on extract.axial_ligands" if not axial_ligands else
                       "the library has no fragment rule for them (backbone carbonyls, "
                       "formyl-Met, other ligands): read this site's embedded shift and its "
                       "residue attribution with that in mind"))
            lig = ligation_key(library[r.code], donors)
            st = library[r.code].ligation_states.get(lig)
            ov = (overrides or {}).get(r.id, {})
            if st and "charge" not in ov and "multiplicity" not in ov:
                notes.append(f"with its axial ligands {lig} in the QM model "
                             f"(extract.axial_ligands) the pigment takes charge "
                             f"{st['charge']:+d}, multiplicity {st['multiplicity']} "
                             f"({st['note']})")
            row.update(status=status, n_atoms_qm=len(m.elements), formula_qm=m.formula,
                       charge=m.charge, multiplicity=m.multiplicity,
                       rebuilt_atoms=" ".join(m.rebuilt),
                       problems="; ".join([*([clash] if clash else []), *notes,
                                           *(p for p in m.problems
                                             if status != "partial" or "rebuilt" not in p)]))
        except ModelError as exc:
            row.update(status="error", n_atoms_qm=0, formula_qm="", charge=None, metal_donors="",
                       donors_outside_qm="",
                       multiplicity=None, problems="; ".join([str(exc), *([clash] if clash
                                                                          else []), *notes]))
        rows.append(row)
    for r in unsup:
        rows.append({"pigment_id": r.id, "ccd_code": r.code, "chain": r.chain, "resid": r.resid,
                     "icode": r.icode, "status": "unsupported", "n_atoms_read": len(r.atoms),
                     "n_heavy_read": len(r.atoms), "n_atoms_qm": 0, "formula_qm": "",
                     "charge": None, "multiplicity": None, "altlocs": "",
                     "rebuilt_atoms": "", "min_contact_A": None, "metal_donors": "",
                     "donors_outside_qm": "",
                     "assembly_interface": "",
                     "problems": f"{r.code} is not in the pigment library; add an entry under "
                                 "`pigments:` in the study config to include it"})
    return rows



def flag_interfaces(rows, atoms, library, path, cutoff_A=6.0, assembly=None):
    """Note, on each pigment row, the assembly copies missing from the file whose heavy atoms
    lie within cutoff_A of the pigment (:mod:`siteshift.structures.assembly`); returns the
    number of pigments flagged. cutoff_A 0: no check."""
    from .assembly import interface_contacts
    if not cutoff_A:
        return 0
    pigs, _ = pigment_residues(atoms, library)
    coords = {r.id: r.atoms.positions[~np.isin(_elements(r.atoms), ["H", "D"])] for r in pigs}
    found = interface_contacts(path, coords, cutoff_A, assembly)
    for row in rows:
        hits = found.get(row["pigment_id"], [])
        row["assembly_interface"] = "; ".join(
            f"assembly {h['assembly']} op {h['operator']}: {h['n_atoms']} atoms, "
            f"{h['closest_A']:.1f} A" for h in hits)
        if hits:
            h = min(hits, key=lambda h: h["closest_A"])
            note = (f"interface with a copy of chain(s) {'+'.join(h['chains'])} made by "
                    f"assembly {h['assembly']} operator {h['operator']} ({h['n_atoms']} heavy "
                    f"atoms within {cutoff_A} A, closest {h['closest_A']:.1f} A) that the file "
                    "lacks: burial, ε and charges miss it; give the assembled structure "
                    "(e.g. gemmi's make_assembly) to include the partner")
            row["problems"] = "; ".join(p for p in (row["problems"], note) if p)
    return len(found)
