"""Groups bonded to a pigment that join its QM model: the donors around its metal (axial
ligands, reported and, as the library allows, added) and covalent links to protein residues
(retinal–Lys Schiff base, thioester with Cys), each cut and capped like a pigment tail."""
from __future__ import annotations

import numpy as np

from .qmmodel import QMModel, build_qm_model, ccd_graph, ccd_residue, check_charge_spin

METALS = {"Mg", "Fe", "Zn", "Ni", "Co", "Cu", "Mn", "Cd", "Ca"}
#: amino-acid ligands: their side chain enters the QM model, cut at CA–CB (CB capped → methyl)
LIGAND_SIDE_CHAINS = {"HIS": ["CB", "CG", "ND1", "CD2", "CE1", "NE2"],
                      "CYS": ["CB", "SG"], "MET": ["CB", "CG", "SD", "CE"],
                      "ASN": ["CB", "CG", "OD1", "ND2"], "GLN": ["CB", "CG", "CD", "OE1", "NE2"]}
#: donor elements looked for around a metal
DONOR_ELEMENTS = {"N", "O", "S"}
#: water geometry for a coordinating water (O–H Å, H–O–H degrees; common practice, TIP3P)
WATER_OH_A, WATER_HOH_DEG = 0.9572, 104.52


def metal_donors(model: QMModel, env_atoms, cutoff_A=2.6):
    """Every N/O/S atom of the environment within cutoff_A of the pigment's metal, closest
    first: [{"residue": "A:HIS52", "atom": "NE2", "distance_A": 2.01, "kind": "side chain" |
    "water" | "backbone O" | "formyl O" | "ligand"}]. Empty without a metal."""
    from .reading import WATERS, is_amino_acid
    metal = [i for i, e in enumerate(model.elements) if e in METALS]
    if not metal or not len(env_atoms):
        return []
    mx = model.coords[metal[0]]
    el = np.char.capitalize(np.char.strip(np.asarray(
        env_atoms.elements if hasattr(env_atoms, "elements") else env_atoms.types).astype(str)))
    d = np.linalg.norm(env_atoms.positions - mx, axis=1)
    out = []
    for k in np.argsort(d):
        if d[k] >= cutoff_A:
            break
        if el[k] not in DONOR_ELEMENTS:
            continue
        a = env_atoms[int(k)]
        rn, name = str(a.resname).upper(), str(a.name)
        if rn in WATERS:
            kind = "water"
        elif rn == "FME" and name == "O1":
            kind = "formyl O"
        elif name in ("O", "OXT") and is_amino_acid(rn):
            kind = "backbone O"
        elif is_amino_acid(rn):
            kind = "side chain"
        else:
            kind = "ligand"
        out.append({"residue": _residue_tag(a), "atom": name,
                    "distance_A": round(float(d[k]), 3), "kind": kind, "_atom": a})
    return out


def _residue_tag(atom) -> str:
    """``CHAIN:RESNNN`` of an MDAnalysis atom (the names ligand atoms carry in a QM model)."""
    ch = str(getattr(atom, "chainID", "") or atom.segid).strip() or "_"
    return f"{ch}:{str(atom.resname).upper()}{atom.resid}"


def _joins_qm(allowed, rn, atom) -> bool:
    """Whether a donor atom's residue enters the QM model: the library's axial_ligand_atoms
    allow it (waters under HOH) and a fragment rule covers it."""
    from .reading import WATERS
    water = rn in WATERS
    ok = atom in allowed.get(rn, ()) or (water and atom in allowed.get("HOH", ()))
    return ok and (water or rn in LIGAND_SIDE_CHAINS)


def _fragment(res_atoms, rn, tag, keep, cut, drop_h_of):
    """A protein residue cut to the atoms `keep` (bond `cut` = [kept, dropped] capped), its CCD
    hydrogens placed, those on atom `drop_h_of` left out. Returns (atoms, formal charge, dropped
    protons, sub-model): atoms as (element, Å, ``TAG:NAME``, ``ligand_<origin>``); the formal
    charge sums the CCD charges of the residue atoms kept."""
    from types import SimpleNamespace
    lt = SimpleNamespace(core=tuple(keep), cut_bonds=(tuple(cut),), charge=0, multiplicity=1)
    sub = build_qm_model(tag, rn, list(res_atoms.names), list(res_atoms.elements),
                         res_atoms.positions, lt, charge=0, multiplicity=1, check_spin=False)
    drop = {h for h in ccd_graph(rn)[3][drop_h_of] if h.startswith("H")}
    arr = ccd_residue(rn)
    formal = {str(n): int(c) for n, c in zip(arr.atom_name, arr.charge)}
    q = sum(formal.get(n, 0) for n, o in zip(sub.names, sub.origin) if o == "structure")
    atoms = [(e, x, f"{tag}:{n}", f"ligand_{o}")
             for e, x, n, o in zip(sub.elements, sub.coords, sub.names, sub.origin)
             if n not in drop]
    return atoms, q, sum(n in drop for n in sub.names), sub


def ligation_key(ptype, donors) -> str:
    """The ligation (residue names joined by "+", sorted) of the donors that
    :func:`add_axial_ligands` puts in the QM model: those the library's axial_ligand_atoms
    allow and a fragment rule covers, one per residue."""
    from .reading import WATERS
    allowed = ptype.axial_ligand_atoms or {}
    seen = {}
    for d in donors:
        rn = d["residue"].split(":", 1)[1].rstrip("0123456789-")
        if _joins_qm(allowed, rn, d["atom"]):
            seen.setdefault(d["residue"], "HOH" if rn in WATERS else rn)
    return "+".join(sorted(seen.values()))


def _water_model(o_pos, metal_pos, tag):
    """A coordinating water: O as read, its hydrogens in the plane through the metal–O axis,
    bisector pointing away from the metal (TIP3P geometry)."""
    u = np.asarray(o_pos) - metal_pos
    u /= np.linalg.norm(u)
    p = np.cross(u, [1.0, 0.0, 0.0])
    if np.linalg.norm(p) < 0.1:
        p = np.cross(u, [0.0, 1.0, 0.0])
    p /= np.linalg.norm(p)
    half = np.radians(WATER_HOH_DEG / 2)
    hs = [o_pos + WATER_OH_A * (np.cos(half) * u + sgn * np.sin(half) * p) for sgn in (1, -1)]
    return (["O", "H", "H"], [np.asarray(o_pos, float), *hs],
            [f"{tag}:O", f"{tag}:H1", f"{tag}:H2"], ["ligand_structure", "ligand_water_h",
                                                     "ligand_water_h"])


def add_axial_ligands(model: QMModel, ptype, env_atoms, cutoff_A=2.6,
                      fixed_state=False) -> QMModel:
    """Add the groups that coordinate the pigment's metal to its QM model, and report every donor.

    env_atoms: MDAnalysis AtomGroup of everything but the pigment. Every N/O/S atom within
    `cutoff_A` of the metal is reported (``model.ligands`` and the problems). Those of residues
    listed in the library entry's ``axial_ligand_atoms`` enter the QM model: an amino acid's side
    chain cut at CA–CB and capped (CB becomes a methyl; rules for His, Cys, Met, Asn, Gln), with
    the proton on the coordinating atom removed (His → neutral Nε/Nδ-coordinated imidazole, Cys →
    thiolate), so the charge changes by the CCD formal charges kept minus the protons removed; a
    water whole (neutral). Backbone carbonyls, formyl-Met and other donors are reported, not added.
    The pigment's own charge and multiplicity then follow the library's ``ligation_states`` for
    the ligands added (e.g. HIS+HIS → Fe(III) low spin for HEM), unless `fixed_state` (a
    pigment override gave them).
    """
    from .reading import WATERS
    donors = metal_donors(model, env_atoms, cutoff_A)
    if not donors:
        return model
    mx = model.coords[[i for i, e in enumerate(model.elements) if e in METALS][0]]
    elements, coords = list(model.elements), [*model.coords]
    names, origin = list(model.names), list(model.origin)
    charge, problems = model.charge, list(model.problems)
    seen, ligands = set(), []
    allowed = ptype.axial_ligand_atoms or {}
    for dn in donors:
        a = dn.pop("_atom")
        rn, tag, lig_atom, dist = str(a.resname).upper(), dn["residue"], dn["atom"], \
            dn["distance_A"]
        water = rn in WATERS
        if tag in seen:
            dn.update(in_qm=True, note="residue already in the QM model")
            ligands.append(dn)
            continue
        if not _joins_qm(allowed, rn, lig_atom):
            why = (f"not among the library's axial_ligand_atoms for {model.code}"
                   if rn in LIGAND_SIDE_CHAINS or water else f"no fragment rule for a {dn['kind']}")
            dn.update(in_qm=False, note=why)
            ligands.append(dn)
            problems.append(f"donor {tag} {lig_atom} ({dn['kind']}, {dist:.2f} A from the "
                            f"metal) not in the QM model: {why}")
            continue
        seen.add(tag)
        if water:
            e3, x3, n3, o3 = _water_model(a.position, mx, tag)
            elements += e3; coords += x3; names += n3; origin += o3
            q = 0
        else:
            frag, q, n_h, _sub = _fragment(a.residue.atoms & env_atoms, rn, tag,
                                           LIGAND_SIDE_CHAINS[rn], ("CB", "CA"), lig_atom)
            q -= n_h      # the coordinating atom's protons leave (His → neutral, Cys → thiolate)
            for e, x, n, o in frag:
                elements.append(e); coords.append(x); names.append(n); origin.append(o)
        charge += q
        dn.update(in_qm=True, note=f"charge {q:+d}")
        ligands.append(dn)
        problems.append(f"axial ligand {tag} ({lig_atom}, {dist:.2f} A) in QM, charge {q:+d}")
    mult = model.multiplicity
    key = ligation_key(ptype, ligands)
    state = (ptype.ligation_states or {}).get(key)
    if state and not fixed_state:
        charge += state["charge"] - model.charge
        mult = state["multiplicity"]
        problems.append(f"ligation {key}: pigment charge {state['charge']:+d}, multiplicity "
                        f"{mult} ({state['note'] or 'library ligation_states'}); a "
                        "pigment_overrides entry sets another state")
    out = QMModel(model.pigment_id, model.code, elements, np.array(coords), names, origin,
                  charge, mult, model.dropped, model.missing, problems,
                  rebuilt=model.rebuilt, ligands=ligands)
    check_charge_spin(model.pigment_id, out.elements, out.charge, out.multiplicity,
                      "check the axial ligands' protonation or the pigment override")
    return out


#: N–H length of a link partner's proton (Å; common practice)
LINK_NH_A = 1.01


def find_link(ptype, res_atoms, env_atoms):
    """The first of the library entry's ``links`` found: (link dict, partner atom) when the
    partner atom of a residue of the link's type lies within max_A of the pigment's link atom;
    else (None, None)."""
    for link in ptype.links or ():
        own = res_atoms[res_atoms.names == link["atom"]]
        if not len(own) or not len(env_atoms):
            continue
        cand = env_atoms[(np.char.upper(np.asarray(env_atoms.resnames).astype(str))
                          == link["residue"]) & (env_atoms.names == link["partner"])]
        if not len(cand):
            continue
        d = np.linalg.norm(cand.positions - own.positions[0], axis=1)
        k = int(np.argmin(d))
        if d[k] <= link["max_A"]:
            return link, cand[k]
    return None, None


def add_link(model: QMModel, link, partner, env_atoms, fixed_state=False) -> QMModel:
    """Add the linked residue's atoms (link["keep"], cut at link["cut"] and capped) to a model
    built with the link's replaced atoms left out; the partner atom gets link["partner_h"]
    hydrogens (0 or 1: in the plane of its two bonds, bisecting them outwards); the model takes
    the link's charge unless `fixed_state`."""
    rn = str(partner.resname).upper()
    tag = _residue_tag(partner)
    pname = link["partner"]
    frag, q_res, _n_h, sub = _fragment(partner.residue.atoms & env_atoms, rn, tag, link["keep"],
                                       link["cut"], pname)
    elements, coords = list(model.elements), [*model.coords]
    names, origin = list(model.names), list(model.origin)
    for e, x, n, o in frag:
        elements.append(e); coords.append(x); names.append(n); origin.append(o)
    px = np.asarray(partner.position, float)
    pig = model.coords[model.names.index(link["atom"])]
    bonded = [b for b in ccd_graph(rn)[3][pname] if b in sub.names and not b.startswith("H")]
    if int(link.get("partner_h", 0)) == 1 and bonded:
        u1 = (pig - px) / np.linalg.norm(pig - px)
        xb = sub.coords[sub.names.index(bonded[0])]
        u2 = (xb - px) / np.linalg.norm(xb - px)
        v = -(u1 + u2)
        elements.append("H"); coords.append(px + LINK_NH_A * v / np.linalg.norm(v))
        names.append(f"{tag}:H{pname}"); origin.append("ligand_link_h")
    dist = float(np.linalg.norm(pig - px))
    charge = model.charge if fixed_state else int(link["charge"])
    problems = list(model.problems) + [
        f"linked residue {tag} ({pname}-{link['atom']}, {dist:.2f} A) in QM, charge "
        f"{q_res:+d} ({link.get('note', '')}; model total {charge:+d})"]
    out = QMModel(model.pigment_id, model.code, elements, np.array(coords), names, origin,
                  charge, model.multiplicity, model.dropped, model.missing, problems,
                  rebuilt=model.rebuilt, ligands=model.ligands)
    check_charge_spin(model.pigment_id, out.elements, out.charge, out.multiplicity,
                      f"check the link {link['residue']} {pname} in the pigment library")
    return out
