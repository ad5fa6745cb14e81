"""The protein's charges: partial charges on every atom of a structure, and the set one site's
QM calculation is embedded in.

Sources, one per kind of residue (every choice is written to the report table):
- amino acids and waters: the Amber ff14SB protein force field with TIP3P water (Maier et al.,
  JCTC 11, 3696 (2015); Jorgensen et al., JCP 79, 926 (1983)) as OpenMM ships them
  (``amber14-all.xml``, ``amber14/tip3p.xml``). Hydrogens and protonation states come from
  OpenMM's ``Modeller.addHydrogens`` at the configured pH (its rules: pKa-based for Asp, Glu,
  Lys, Cys; His from pH and hydrogen bonding), except where the structure decides: a histidine
  named HID/HIE/HIP in the file keeps that state, and one whose Nδ1 or Nε2 binds a metal within
  2.6 Å keeps that nitrogen unprotonated. Missing heavy atoms of a residue are added by PDBFixer
  (reported); missing residues are not built.
- pigments of the library: charges fitted to the electrostatic potential of each pigment type's
  QM model (:mod:`siteshift.qm.esp`), placed on every copy by atom name; the cap hydrogens carry
  theirs. Atoms a QM model drops (tails cut at the library's bonds) carry none, except the
  ionisable groups such a tail holds: a carboxylic acid (heme propionates) is a carboxylate,
  −1 e shared by its two oxygens, above pH 4.5; a phosphate monoester (FMN) −2 e above pH 6.5
  (else −1), a diester (FAD's pyrophosphate, per P) −1 e, shared by the oxygens bonded to the P
  alone (pKa values common practice, from memory: propionic acid 4.9, the second pKa of
  phosphate monoesters 6–7). These tail charges stay in the site's own environment too
  (``site_charges``), so that a cut does not delete the groups' charge; the cut's link atom
  carries none, and the cap hydrogen sits ≥ 1.5 Å from any of them (reported when not).
- ions and other hetero residues: the formal charges of the wwPDB Chemical Component Dictionary
  (biotite's offline copy) on the atoms that carry them.
- a residue none of these covers: an error naming it (``unknown: error``), or zero charges
  listed in the report (``unknown: neutral``); charges per atom name can be given for any code.

Cut bonds: when a site's QM model takes side chains of its axial ligands, those atoms leave the
charge set; the MM atom bonded to the cut (Cα, next to the capped Cβ) is set to zero, and the
rest of the residue is shifted evenly so that its total stays the residue's integer charge minus
the charge the QM model took (the "redistributed charge" idea of QM/MM boundary schemes, Lin &
Truhlar, J. Phys. Chem. A 109, 3991 (2005)).
"""
from __future__ import annotations

import io as _io
import random
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from ..base.defaults import default
from ..structures.reading import AMINO_ACIDS, WATERS, classify, residues_of

_EL = default("electrostatics")

#: amino-acid names that carry a protonation state of their own (kept as written)
HIS_STATES = {"HID": "HID", "HIE": "HIE", "HIP": "HIP", "HSD": "HID", "HSE": "HIE",
              "HSP": "HIP"}
OTHER_STATES = {"ASH": "ASP", "GLH": "GLU", "LYN": "LYS", "CYX": "CYS", "CYM": "CYS"}
METAL_ELEMENTS = {"MG", "FE", "ZN", "CU", "MN", "CO", "NI", "CA", "CD"}
BACKBONE = {"N", "H", "H1", "H2", "H3", "CA", "HA", "HA2", "HA3", "C", "O", "OXT"}
CHARGE_COLUMNS = ["chain", "resname", "resid", "icode", "atom", "element", "x_A", "y_A", "z_A",
                  "charge_e", "source"]
#: seed of the random start positions OpenMM gives the hydrogens it adds
HYDROGEN_SEED = 20261203
REPORT_COLUMNS = ["chain", "resname", "resid", "icode", "kind", "choice", "note"]


class ChargeError(ValueError):
    pass


@dataclass
class ChargeSettings:
    ph: float = _EL["ph"]
    unknown: str = _EL["unknown_residues"]          # "error" or "neutral"
    residue_charges: dict = field(default_factory=dict)   # {CODE: {ATOM: charge}}
    forcefield: tuple = ("amber14-all.xml", "amber14/tip3p.xml")


def residue_key(chain, resname, resid, icode="") -> str:
    """The key residues are named by in every electrostatics table, e.g. ``A:GLU6``."""
    return f"{chain}:{resname}{int(resid)}{icode or ''}"


def _pdb_line(serial, name, resname, chain, resid, icode, xyz, element):
    nm = name if len(name) == 4 or len(element) == 2 else f" {name}"
    return (f"ATOM  {serial % 100000:5d} {nm:<4s} {resname:>3s} {chain[:1]:1s}{resid:4d}"
            f"{(icode or ' ')[:1]:1s}   {xyz[0]:8.3f}{xyz[1]:8.3f}{xyz[2]:8.3f}  1.00  0.00"
            f"          {element:>2s}\n")


def _element(atom) -> str:
    e = str(getattr(atom, "element", "") or getattr(atom, "type", "")).strip().upper()
    return e or str(atom.name).strip()[:1].upper()


def _metal_ligands(residues):
    """{(chain, resid, icode): atom name} of histidine nitrogens within 2.6 Å of a metal."""
    metals = []
    for r in residues:
        for a in r.atoms:
            if _element(a) in METAL_ELEMENTS:
                metals.append(a.position)
    out = {}
    if not metals:
        return out
    M = np.asarray(metals)
    for r in residues:
        if r.code not in ("HIS",) + tuple(HIS_STATES):
            continue
        for a in r.atoms:
            if str(a.name) in ("ND1", "NE2") and \
                    np.min(np.linalg.norm(M - a.position, axis=1)) < 2.6:
                out[(r.chain, r.resid, r.icode)] = str(a.name)
    return out


def _covalent_links(residues, others, report, cutoff=2.2):
    """Report amino-acid atoms bonded to a hetero residue (e.g. the thioether of a c-type
    cytochrome's Cys and its heme): the force field has no template for the link, so the
    residue keeps the charges of its free form."""
    het = [(a.position, r, str(a.name)) for r in others for a in r.atoms
           if _element(a) not in ("H", "D") and _element(a) not in METAL_ELEMENTS]
    if not het:
        return
    X = np.array([h[0] for h in het])
    for r in residues:
        if r.code in WATERS:
            continue
        for a in r.atoms:
            if _element(a) in ("H", "D", "C") or str(a.name) in BACKBONE:
                continue
            d = np.linalg.norm(X - a.position, axis=1)
            k = int(np.argmin(d))
            if d[k] < cutoff:
                o = het[k][1]
                report.append({"chain": r.chain, "resname": r.code, "resid": r.resid,
                               "icode": r.icode, "kind": "covalent link",
                               "choice": f"free {r.code} charges",
                               "note": f"{a.name} bonded to {o.code} {o.chain}{o.resid} "
                                       f"{het[k][2]} ({d[k]:.2f} A); the force field has no "
                                       "template for the link"})


def _protein_charges(residues, settings: ChargeSettings, report, others=()):
    """Force-field charges (and hydrogen positions) of amino acids and waters."""
    from openmm import NonbondedForce, Platform, app, unit
    from pdbfixer import PDBFixer

    lines, serial, chain_prev = [], 1, None
    wanted = {}
    for r in residues:
        if r.chain != chain_prev and chain_prev is not None:
            lines.append("TER\n")
        chain_prev = r.chain
        if r.code in WATERS:
            name = "HOH"
        elif r.code in HIS_STATES:
            name = "HIS"
        else:
            name = OTHER_STATES.get(r.code, r.code)
        if r.code in HIS_STATES or r.code in OTHER_STATES:
            wanted[(r.chain, r.resid, r.icode)] = (HIS_STATES.get(r.code, r.code),
                                                   "named so in the file")
        for a in r.atoms:
            el = _element(a)
            if el in ("H", "D"):
                continue
            lines.append(_pdb_line(serial, str(a.name), name, r.chain, r.resid, r.icode,
                                   a.position, el))
            serial += 1
    lines.append("END\n")
    for key, atom in _metal_ligands(list(residues) + list(others)).items():
        if key not in wanted:
            wanted[key] = ("HID" if atom == "NE2" else "HIE",
                           f"{atom} binds a metal: kept unprotonated")
    _covalent_links(residues, others, report)
    fixer = PDBFixer(pdbfile=_io.StringIO("".join(lines)))
    fixer.findMissingResidues()
    fixer.missingResidues = {}
    fixer.findNonstandardResidues()
    fixer.replaceNonstandardResidues()
    fixer.findMissingAtoms()
    for res, atoms in fixer.missingAtoms.items():
        report.append({"chain": res.chain.id, "resname": res.name, "resid": int(res.id),
                       "icode": res.insertionCode.strip(), "kind": "protein",
                       "choice": "missing atoms added",
                       "note": "PDBFixer added " + " ".join(a.name for a in atoms)})
    fixer.missingTerminals = {}
    fixer.addMissingAtoms()
    ff = app.ForceField(*settings.forcefield)
    modeller = app.Modeller(fixer.topology, fixer.positions)
    variants = []
    for res in modeller.topology.residues():
        key = (res.chain.id, int(res.id), res.insertionCode.strip())
        variants.append(wanted.get(key, (None, ""))[0])
    try:
        # OpenMM starts the hydrogens it adds at random positions (Python's `random`) and
        # then minimises them: a fixed seed and the Reference platform make every run place
        # them alike (unseeded, two runs differed by up to 1.9 Å and moved a demo site's
        # first-order shift by 1 meV, and the QM cache, keyed on the charges, missed)
        state = random.getstate()
        random.seed(HYDROGEN_SEED)
        try:
            actual = modeller.addHydrogens(ff, pH=settings.ph, variants=variants,
                                           platform=Platform.getPlatformByName("Reference"))
        finally:
            random.setstate(state)
        system = ff.createSystem(modeller.topology, nonbondedMethod=app.NoCutoff,
                                 constraints=None, rigidWater=False)
    except ValueError as exc:
        raise ChargeError(f"the force field could not type the protein: {exc}; check the "
                          "residue it names (non-standard residues need "
                          "electrostatics.residue_charges)") from None
    nb = next(f for f in system.getForces() if isinstance(f, NonbondedForce))
    pos = modeller.positions.value_in_unit(unit.angstrom)
    rows = []
    for res, var in zip(modeller.topology.residues(), actual):
        key = (res.chain.id, int(res.id), res.insertionCode.strip())
        if res.name == "HIS":
            why = wanted.get(key, (None, f"OpenMM at pH {settings.ph:g} (hydrogen bonds)"))[1]
            report.append({"chain": key[0], "resname": "HIS", "resid": key[1],
                           "icode": key[2], "kind": "histidine", "choice": var, "note": why})
        elif var is not None and var != res.name and res.name != "HOH":
            why = wanted.get(key, (None, f"OpenMM at pH {settings.ph:g}"))[1]
            report.append({"chain": key[0], "resname": res.name, "resid": key[1],
                           "icode": key[2], "kind": "protonation", "choice": var,
                           "note": why})
        for a in res.atoms():
            q = nb.getParticleParameters(a.index)[0].value_in_unit(unit.elementary_charge)
            el = a.element.symbol if a.element is not None else a.name[:1]
            rows.append({"chain": key[0], "resname": "HOH" if res.name == "HOH" else res.name,
                         "resid": key[1], "icode": key[2], "atom": a.name, "element": el,
                         "x_A": pos[a.index][0], "y_A": pos[a.index][1],
                         "z_A": pos[a.index][2], "charge_e": q,
                         "source": "tip3p" if res.name == "HOH" else "ff14SB"})
    return rows


#: pKa values deciding a pigment tail's ionisable groups (common practice, from memory)
CARBOXYL_PKA = 4.5
PHOSPHATE_PKA2 = 6.5
TAIL_SOURCE = "tail"


def tail_group_charges(code, dropped, ph) -> dict:
    """{atom name: charge e} of the ionisable groups among a pigment's dropped (cut-off) atoms
    at pH `ph` (see the module docstring); every other dropped atom carries none."""
    from ..structures.qmmodel import ccd_graph
    names, elements, _x, adj = ccd_graph(code)
    elem = dict(zip(names, elements))
    gone = set(dropped)
    out = {}
    for n in gone:
        if elem.get(n) not in ("C", "P"):
            continue
        terminal = sorted(o for o in adj[n] if elem[o] == "O"
                          and all(b == n or elem[b] == "H" for b in adj[o]))
        if not terminal or not set(terminal) <= gone:
            continue
        if elem[n] == "C" and len(terminal) == 2:
            q = -1.0 if ph > CARBOXYL_PKA else 0.0
        elif elem[n] == "P" and len(terminal) == 3:
            q = -2.0 if ph > PHOSPHATE_PKA2 else -1.0
        elif elem[n] == "P" and len(terminal) == 2:
            q = -1.0
        else:
            continue
        for o in terminal:
            out[o] = q / len(terminal)
    return {k: v for k, v in out.items() if v}


def _pigment_charges(res, library, pigment_charges, overrides, report, ph=_EL["ph"]):
    from ..structures.inventory import model_for
    fit = (pigment_charges or {}).get(res.code)
    if fit is None:
        raise ChargeError(f"pigment {res.id} ({res.code}) has no fitted charges: compute them "
                          f"(`siteshift charges --fit {res.code}` or the workflow's "
                          f"fit_pigment_charges rule) or give electrostatics.residue_charges."
                          f"{res.code}")
    m = model_for(res, library, overrides)
    by_name = dict(zip(fit["names"], fit["charges"]))
    missing = [n for n in m.names if n not in by_name]
    if missing:
        raise ChargeError(f"pigment {res.id}: fitted {res.code} charges lack atoms {missing[:5]} "
                          "(its QM model differs from the one the charges were fitted on); "
                          "refit them")
    rows = [{"chain": res.chain, "resname": res.code, "resid": res.resid, "icode": res.icode,
             "atom": n, "element": e, "x_A": x[0], "y_A": x[1], "z_A": x[2],
             "charge_e": by_name[n], "source": f"esp:{res.code}"}
            for n, e, x in zip(m.names, m.elements, m.coords)]
    n_model = len(rows)
    tail = tail_group_charges(res.code, m.dropped, ph)
    pos = {str(a.name): a.position for a in res.atoms}
    for n, qn in sorted(tail.items()):
        x = pos[n]
        rows.append({"chain": res.chain, "resname": res.code, "resid": res.resid,
                     "icode": res.icode, "atom": n, "element": "O", "x_A": x[0], "y_A": x[1],
                     "z_A": x[2], "charge_e": qn, "source": f"{TAIL_SOURCE}:{res.code}"})
    note = f"total {sum(r['charge_e'] for r in rows[:n_model]):+.3f} e on its QM model's " \
           f"{n_model} atoms"
    if tail:
        note += (f"; its cut-off tail's ionisable groups at pH {ph:g}: {sum(tail.values()):+.0f}"
                 f" e on {' '.join(sorted(tail))}")
    rest = [d for d in m.dropped if d not in tail]
    if rest:
        note += f"; other dropped atoms {' '.join(rest)} carry none"
    report.append({"chain": res.chain, "resname": res.code, "resid": res.resid,
                   "icode": res.icode, "kind": "pigment", "choice": "ESP-fitted",
                   "note": note})
    return rows


def _formal_charges(res, settings: ChargeSettings, report):
    """CCD formal charges (or the user's per-atom charges) of an ion or hetero residue."""
    given = settings.residue_charges.get(res.code)
    names = [str(n) for n in res.atoms.names]
    heavy = [a for a in res.atoms if _element(a) not in ("H", "D")]
    if given is not None:
        q = {n: float(given.get(n, 0.0)) for n in names}
        src, note = "user", "electrostatics.residue_charges"
    else:
        try:
            import biotite.structure.info as info
            arr = info.residue(res.code)
            formal = {str(n): int(c) for n, c in zip(arr.atom_name, arr.charge) if c}
        except KeyError:
            formal = None
        if formal is None:
            if settings.unknown == "neutral":
                report.append({"chain": res.chain, "resname": res.code, "resid": res.resid,
                               "icode": res.icode, "kind": "unknown", "choice": "no charges",
                               "note": "not in the CCD; electrostatics.unknown_residues: "
                                       "neutral"})
                return []
            raise ChargeError(f"residue {residue_key(res.chain, res.code, res.resid, res.icode)}"
                              f" ({res.code}) has no charges: not a standard residue, library "
                              f"pigment or CCD component; give electrostatics.residue_charges."
                              f"{res.code}: {{ATOM: charge}}, or set "
                              "electrostatics.unknown_residues: neutral")
        total = sum(formal.values())
        q = {n: 0.0 for n in names}
        present = [n for n in formal if n in q]
        if total and len(present) == len(formal):
            q.update({n: float(formal[n]) for n in present})
        elif total:  # an atom that carries it is missing: spread over the heavy atoms present
            for a in heavy:
                q[str(a.name)] = total / len(heavy)
        src, note = "formal", f"CCD formal charges, total {total:+d} e"
    report.append({"chain": res.chain, "resname": res.code, "resid": res.resid,
                   "icode": res.icode, "kind": "hetero", "choice": src, "note": note})
    return [{"chain": res.chain, "resname": res.code, "resid": res.resid, "icode": res.icode,
             "atom": str(a.name), "element": _element(a), "x_A": a.position[0],
             "y_A": a.position[1], "z_A": a.position[2], "charge_e": q[str(a.name)],
             "source": src} for a in res.atoms if _element(a) not in ("H", "D")
            or q[str(a.name)]]


def assign_charges(atoms, library, pigment_charges=None, settings: ChargeSettings | None = None,
                   overrides=None):
    """(charges, report): a table of every charged atom (CHARGE_COLUMNS; Å, e) and a table of
    every choice made (REPORT_COLUMNS): histidine states, other protonation variants, added
    atoms, pigment and hetero charges.

    atoms: an MDAnalysis AtomGroup (altlocs already resolved); pigment_charges: {CODE:
    {"names": [...], "charges": [...]}} fitted per pigment type."""
    settings = settings or ChargeSettings()
    if settings.unknown not in ("error", "neutral"):
        raise ChargeError(f"electrostatics.unknown_residues must be 'error' or 'neutral', got "
                          f"{settings.unknown!r}")
    residues = residues_of(atoms)
    report, rows = [], []
    for r in residues:
        alt = sorted({str(x).strip() for x in getattr(r.atoms, "altLocs", [])} - {"", "."})
        if alt:
            report.append({"chain": r.chain, "resname": r.code, "resid": r.resid,
                           "icode": r.icode, "kind": "altloc", "choice": "+".join(alt),
                           "note": "alternate location kept by the altloc policy; its "
                                   "coordinates carry the charges"})
    protein = [r for r in residues if r.code in AMINO_ACIDS or r.code in WATERS]
    for r in residues:
        if r.code in settings.residue_charges and r.code not in AMINO_ACIDS:
            rows += _formal_charges(r, settings, report)
        elif classify(r.code, library) == "pigment":
            rows += _pigment_charges(r, library, pigment_charges, overrides, report,
                                     settings.ph)
        elif r.code not in AMINO_ACIDS and r.code not in WATERS:
            rows += _formal_charges(r, settings, report)
    if protein:
        others = [r for r in residues if r.code not in AMINO_ACIDS and r.code not in WATERS]
        rows = _protein_charges(protein, settings, report, others) + rows
    charges = pd.DataFrame(rows, columns=CHARGE_COLUMNS)
    charges["icode"] = charges["icode"].fillna("").astype(str)
    rep = pd.DataFrame(report, columns=REPORT_COLUMNS)
    return charges, rep


def residue_totals(charges: pd.DataFrame) -> pd.Series:
    """Net charge (e) of every residue, keyed by :func:`residue_key`."""
    keys = [residue_key(c, n, i, k) for c, n, i, k in
            zip(charges.chain, charges.resname, charges.resid, charges.icode)]
    return charges.charge_e.groupby(keys).sum()


def site_charges(charges: pd.DataFrame, record: dict):
    """(coords Å, charges e, residue keys, notes) of the charges a site is embedded in.

    record: the site's QM-model record (``qm_model.json``). Its pigment residue leaves the set,
    but for the charged groups of its cut-off tail (kept: the cut must not delete them);
    side chains its QM model took (axial ligands, named ``CHAIN:RESNNN:ATOM``) leave it too,
    the atom bonded to the cut is zeroed and the residue's remaining charges are shifted to keep
    its total (see the module docstring)."""
    pid = record["pigment_id"]
    chain = pid.split("_", 1)[0]
    code = record["ccd_code"]
    num = pid.split("_", 1)[1][len(code):]
    icode = num[-1] if num and num[-1].isalpha() else ""
    resid = int(num[:-1] if icode else num)
    df = charges.copy()
    site = (df.chain == chain) & (df.resname == code) & (df.resid == resid) & \
        (df.icode.astype(str) == icode)
    own_tail = site & df.source.astype(str).str.startswith(f"{TAIL_SOURCE}:")
    keep = ~site | own_tail
    notes = []
    if own_tail.any():
        xt = df.loc[own_tail, ["x_A", "y_A", "z_A"]].to_numpy(float)
        d = np.linalg.norm(xt[:, None] - np.asarray(record["coords_A"], float)[None], axis=-1)
        notes.append(f"{pid}: its cut-off tail keeps {df.charge_e[own_tail].sum():+.1f} e on "
                     f"{' '.join(df.atom[own_tail])}, closest QM atom {d.min():.2f} A"
                     + (" (under 1.5 A: a charge this close to the model over-polarises it)"
                        if d.min() < 1.5 else ""))
    ligands = {}
    for name, origin in zip(record["names"], record["origin"]):
        if origin.startswith("ligand_") and name.count(":") == 2:
            tag, atom = name.rsplit(":", 1)
            ligands.setdefault(tag, set()).add(atom)
    q = df.charge_e.to_numpy(dtype=float).copy()
    qm_charge = _ligand_charges(record)
    for tag, _names in ligands.items():
        ch, rest = tag.split(":", 1)
        rn = rest.rstrip("0123456789-")
        rid = int(rest[len(rn):])
        res = (df.chain == ch) & (df.resid == rid) & (df.resname.str[:2] == rn[:2])
        side = res & ~df.atom.isin(BACKBONE)
        link = res & (df.atom == "CA")
        total = float(df.charge_e[res].sum())
        target = round(total) - qm_charge.get(tag, 0)
        keep &= ~side
        q[link.to_numpy()] = 0.0
        rest_mask = (res & ~side & ~link).to_numpy()
        if rest_mask.any():
            q[rest_mask] += (target - q[rest_mask].sum()) / rest_mask.sum()
        notes.append(f"{tag}: side chain in the QM model; CA zeroed, {int(rest_mask.sum())} "
                     f"backbone atoms shifted to keep {target:+d} e")
    df = df[keep]
    q = q[keep.to_numpy()]
    keys = [residue_key(c, n, i, k) for c, n, i, k in
            zip(df.chain, df.resname, df.resid, df.icode)]
    return df[["x_A", "y_A", "z_A"]].to_numpy(float), q, keys, notes


def _ligand_charges(record) -> dict:
    """{ligand tag: charge the QM model took with it}, from the model's problem notes."""
    out = {}
    for p in record.get("problems", []):
        if p.startswith(("axial ligand ", "linked residue ")) and "charge " in p:
            tag = p.split()[2]
            out[tag] = int(p.rsplit("charge ", 1)[1].split()[0])
    return out
