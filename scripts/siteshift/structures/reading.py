"""Reading structures (PDB / mmCIF, gzipped or not) and finding pigments in them."""
from __future__ import annotations

import warnings
from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path

import numpy as np

AMINO_ACIDS = {
    "ALA", "ARG", "ASN", "ASP", "CYS", "GLN", "GLU", "GLY", "HIS", "ILE", "LEU", "LYS", "MET",
    "PHE", "PRO", "SER", "THR", "TRP", "TYR", "VAL", "HID", "HIE", "HIP", "HSD", "HSE", "HSP",
    "MSE", "SEC", "PYL", "ASH", "GLH", "LYN", "CYX",
}
WATERS = {"HOH", "WAT", "DOD", "H2O", "TIP3", "SOL"}
#: common ions and crystallisation additives that are neither pigments nor "unsupported pigments"
ADDITIVES = {"NA", "CL", "K", "MG", "CA", "ZN", "SO4", "PO4", "GOL", "EDO", "PEG", "ACT", "FMT",
             "MPD", "DMS", "BR", "IOD", "NI", "CD", "MN", "FE", "FE2", "CU", "NO3", "TRS", "EPE",
             "MES", "BME", "PG4", "PGE", "1PE", "LDA", "BOG", "LMT", "HEZ", "IPA", "EOH"}
ALTLOC_POLICIES = ("occupancy", "first")


class StructureError(ValueError):
    pass


def _suffix(path: Path) -> str:
    s = path.name.lower()
    if s.endswith(".gz"):
        s = s[:-3]
    for ext in (".pdb", ".ent", ".cif", ".mmcif"):
        if s.endswith(ext):
            return ext
    return ""


def _check_records(path: Path, fmt: str):
    """An empty file, or one without atom records, is named as such (the parsers' own messages
    say 'Compressed file ended…' or 'index 0 is out of bounds')."""
    import gzip
    opener = gzip.open if path.suffix.lower() == ".gz" else open
    marks = ("ATOM", "HETATM") if fmt == "PDB" else ("_atom_site.",)
    blank = True
    try:   # read only as far as the first atom record (the parser reads the file next)
        with opener(path, "rt", errors="replace") as fh:
            for line in fh:
                blank = blank and not line.strip()
                if line.startswith(marks):
                    return
    except (OSError, EOFError) as exc:
        raise StructureError(f"{path}: cannot be read ({exc}); is it a complete (gzipped) "
                             "file?") from None
    if blank:
        raise StructureError(f"{path}: the file is empty; give a PDB or mmCIF structure")
    if fmt == "PDB":
        raise StructureError(f"{path}: no ATOM or HETATM records; is it a PDB file? (an mmCIF "
                             "file must end in .cif)")
    raise StructureError(f"{path}: no _atom_site loop; is it an mmCIF file? (a PDB file must "
                         "end in .pdb)")


def _check_positions(path: Path, atoms):
    """Non-finite coordinates and the 9999.999 placeholders of unplaced atoms are refused,
    naming the atom: either would send a fragment to the QM thousands of Å away."""
    pos = atoms.positions
    bad = np.where(~np.isfinite(pos).all(axis=1) | (np.abs(pos) >= 9999.0).any(axis=1))[0]
    if len(bad):
        a = atoms[int(bad[0])]
        chain = getattr(a, "chainID", "") or a.segid
        raise StructureError(f"{path}: atom {a.name} of {a.resname} {chain}{a.resid} has "
                             f"coordinates {np.round(pos[bad[0]], 3).tolist()} (not a position); "
                             f"{len(bad)} such atom(s): fix or remove them")


def read_structure(path, altloc: str = "occupancy", model: int = 0, report: dict | None = None):
    """Read a structure with MDAnalysis and return an AtomGroup with one conformer per disorder
    group (see :func:`select_altlocs`).

    altloc: "occupancy" keeps, in each disorder group, the alternate location with the highest
    summed occupancy (ties: alphabetical first); "first" keeps the alphabetically first; a single
    letter keeps that label where the group has it (else the occupancy choice). Applied before
    anything else, since bonds guessed across altlocs are wrong. report: a dict filled with what
    was chosen per ligand (:func:`select_altlocs`).
    """
    import MDAnalysis as mda

    path = Path(path)
    if not path.exists():
        raise StructureError(f"structure file {path} does not exist")
    ext = _suffix(path)
    if ext not in (".pdb", ".ent", ".cif", ".mmcif"):
        raise StructureError(f"{path}: unknown structure format; use .pdb, .ent, .cif or .mmcif "
                             "(optionally .gz)")
    fmt = "PDB" if ext in (".pdb", ".ent") else "MMCIF"
    _check_records(path, fmt)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            u = mda.Universe(str(path), format=fmt)
        except Exception as exc:  # MDAnalysis raises many types for unreadable files
            raise StructureError(f"{path}: not a readable {fmt} structure ({exc})") from None
    if len(u.atoms) == 0:
        raise StructureError(f"{path}: the structure holds no atoms")
    if model:
        u.trajectory[model]
    atoms = u.atoms
    _check_positions(path, atoms)
    if not hasattr(atoms, "altLocs"):
        return atoms
    keep = select_altlocs(atoms, altloc, report=report)
    return atoms[keep]


#: a residue with an altloc atom this close (Å) to a ligand's altloc atoms follows the ligand's
#: conformer state (modelling choice: the first shell of contacts, where two states of a site
#: are refined against each other; farther disorder is independent)
ALTLOC_CONTEXT_A = 5.0


def _groups(names, labels):
    """Disorder groups of one residue: sets of altloc labels that are alternatives of each other
    (they give positions to the same atom names). Labels on disjoint atom sets (ring 1 in A/B,
    ring 2 in C/D) are independent groups, each resolved on its own."""
    parent = {lab: lab for lab in set(labels)}

    def root(x):
        while parent[x] != x:
            parent[x] = parent[parent[x]]
            x = parent[x]
        return x

    by_name = {}
    for n, lab in zip(names, labels):
        by_name.setdefault(n, set()).add(lab)
    for labs in by_name.values():
        labs = sorted(labs)
        for other in labs[1:]:
            parent[root(other)] = root(labs[0])
    out = {}
    for lab in parent:
        out.setdefault(root(lab), set()).add(lab)
    return sorted((sorted(g) for g in out.values()), key=lambda g: g[0])


def _pick(group, occ_of, policy):
    if policy == "first":
        return group[0]
    if len(policy) == 1 and policy in group:
        return policy
    return max(group, key=lambda lab: (occ_of[lab], -group.index(lab)))


def select_altlocs(atoms, policy: str = "occupancy", report: dict | None = None,
                   context_A: float = ALTLOC_CONTEXT_A) -> np.ndarray:
    """Boolean mask of the atoms kept: one conformer per disorder group, consistent around
    ligands.

    1. Within a residue, altloc labels that place the same atom names are one disorder group;
       independent groups (A/B on one ring, C/D on another) are resolved separately, so no atom
       of the residue is lost.
    2. Ligands (HETATM residues that are not water, amino acids or additives: the pigments) choose
       first, by `policy`. Residues and waters with altloc atoms within `context_A` of a ligand's
       altloc atoms follow its state: a group holding the ligand's chosen label takes it; a
       group present only in a state the ligand rejected (a label that is an alternative of the
       chosen one in the ligand or in any group nearby; or, where the ligand's state has no
       alternative in sight, any other label) is dropped — it belongs to the state without the
       ligand's conformer. Everything else is chosen by `policy`.
    Atoms without an altloc are always kept (a blank-altloc water of the other state is caught
    by the inventory's clash check). report: filled with {ligand id: {"altlocs": "A+C",
    "rejected": "B+D", "followers": n residues, "dropped_atoms": n}}.
    """
    alt = np.asarray(atoms.altLocs).astype(str)
    alt = np.where(np.isin(alt, ["", " ", "."]), "", alt)
    if policy not in ALTLOC_POLICIES and not (len(policy) == 1 and policy.isalnum()):
        raise StructureError(f"altloc policy {policy!r} not one of {ALTLOC_POLICIES} or a letter")
    keep = alt == ""
    if keep.all():
        return keep
    occ = np.asarray(atoms.occupancies, dtype=float) if hasattr(atoms, "occupancies") \
        else np.ones(len(atoms))
    names = np.asarray(atoms.names).astype(str)
    resindex = atoms.resindices
    resnames = np.char.upper(np.char.strip(np.asarray(atoms.resnames).astype(str)))
    records = np.asarray(atoms.record_types).astype(str) if hasattr(atoms, "record_types") \
        else np.full(len(atoms), "HETATM")
    disordered = np.unique(resindex[~keep])
    info = {}
    for r in disordered:
        sel = np.where((resindex == r) & ~keep)[0]
        occ_of = {lab: occ[sel[alt[sel] == lab]].sum() for lab in set(alt[sel])}
        info[r] = (sel, _groups(names[sel], alt[sel]), occ_of)

    def is_ligand(r):
        i = info[r][0][0]
        return (resnames[i] not in AMINO_ACIDS and resnames[i] not in WATERS
                and resnames[i] not in ADDITIVES and records[i] == "HETATM")

    choice = {}
    ligands = [r for r in disordered if is_ligand(r)]
    for r in ligands:
        sel, groups, occ_of = info[r]
        choice[r] = [_pick(g, occ_of, policy) for g in groups]
    followers = {}
    if ligands:
        from scipy.spatial import cKDTree
        alt_idx = np.where(~keep)[0]
        tree = cKDTree(atoms.positions[alt_idx])
        for r in ligands:
            sel, groups, _occ = info[r]
            near = set()
            for hits in tree.query_ball_point(atoms.positions[sel], context_A):
                near.update(int(resindex[alt_idx[h]]) for h in hits)
            near.discard(int(r))
            near -= set(ligands)
            chosen = set(choice[r])
            rejected = {lab for g in groups for lab in g} - chosen
            for o in near:           # alternatives of a chosen label seen in the neighbours
                for g in info[o][1]:
                    if chosen & set(g):
                        rejected |= set(g) - chosen
            followers[r] = (sorted(near), chosen, rejected)
    for r in disordered:
        if r in choice:
            continue
        sel, groups, occ_of = info[r]
        leads = [followers[lig] for lig in ligands if r in followers[lig][0]]
        picks = []
        for g in groups:
            lab = None
            for _near, chosen, rejected in leads:
                hit = sorted(chosen & set(g))
                if hit:
                    lab = hit[0]
                    break
                if len(g) == 1 and (g[0] in rejected if rejected else g[0] not in chosen):
                    lab = ""      # present only in a state without the ligand's: dropped
                    break
            picks.append(_pick(g, occ_of, policy) if lab is None else lab)
        choice[r] = picks
    dropped_near = {}
    for r, picks in choice.items():
        sel, groups, _occ = info[r]
        for g, lab in zip(groups, picks):
            m = sel[np.isin(alt[sel], g)]
            if lab:
                keep[m[alt[m] == lab]] = True
            else:
                dropped_near[r] = dropped_near.get(r, 0) + len(m)
    if report is not None:
        chains = np.asarray(atoms.chainIDs).astype(str) if hasattr(atoms, "chainIDs") \
            else np.asarray(atoms.segids).astype(str)
        resids = atoms.resids
        icodes = np.asarray(getattr(atoms, "icodes", np.full(len(atoms), ""))).astype(str)
        for r in ligands:
            i = info[r][0][0]
            ic = "" if icodes[i] in (" ", ".") else icodes[i].strip()
            pid = pigment_id(chains[i].strip() or "_", resnames[i], resids[i], ic)
            near, chosen, rejected = followers[r]
            report[pid] = {"altlocs": "+".join(sorted(chosen)),
                           "rejected": "+".join(sorted(rejected)),
                           "followers": len(near),
                           "dropped_atoms": int(sum(dropped_near.get(o, 0) for o in near))}
    return keep


def chain_of(atoms) -> str:
    for attr in ("chainIDs", "segids"):
        if hasattr(atoms, attr):
            v = str(getattr(atoms, attr)[0]).strip()
            if v:
                return v
    return "_"


def icode_of(residue) -> str:
    ic = getattr(residue, "icode", "")
    return "" if ic in (None, " ", ".") else str(ic).strip()


def pigment_id(chain: str, code: str, resid: int, icode: str = "") -> str:
    """Stable pigment id, e.g. ``A_BCL302`` or ``B_HEM101A`` (insertion code appended)."""
    return f"{chain}_{code}{int(resid)}{icode}"


@dataclass
class Residue:
    chain: str
    code: str
    resid: int
    icode: str
    atoms: object  # MDAnalysis AtomGroup

    @property
    def id(self) -> str:
        return pigment_id(self.chain, self.code, self.resid, self.icode)


def residues_of(atoms):
    """Residues of an AtomGroup, each with its chain id (split by chain too)."""
    out = []
    chains = np.asarray(atoms.chainIDs).astype(str) if hasattr(atoms, "chainIDs") else None
    for res in atoms.residues:
        ag = res.atoms & atoms
        if chains is not None:
            chs = sorted(set(np.asarray(ag.chainIDs).astype(str)))
        else:
            chs = [chain_of(ag)]
        for ch in chs:
            sub = ag[np.asarray(ag.chainIDs).astype(str) == ch] if chains is not None else ag
            out.append(Residue(ch.strip() or "_", str(res.resname).strip().upper(),
                               int(res.resid), icode_of(res), sub))
    return out


@lru_cache(maxsize=None)
def ccd_link_type(code: str) -> str:
    """The CCD's chemical-component type of a residue code ("L-PEPTIDE LINKING",
    "NON-POLYMER", "RNA LINKING", ...; offline copy shipped with biotite), "" if unknown."""
    import biotite.structure.info as info
    try:
        return str(info.link_type(code) or "").upper()
    except (KeyError, ValueError):
        return ""


def is_amino_acid(code: str) -> bool:
    """A standard or force-field amino-acid name, or a CCD component of peptide-linking type
    (modified residues: MSE, SEP, TPO, FME, ...)."""
    return code in AMINO_ACIDS or "PEPTIDE" in ccd_link_type(code)


def classify(code: str, library: dict) -> str:
    """'pigment', 'protein', 'water', 'additive' or 'unsupported' (a ligand not in the library).

    The library comes first: an in-chain chromophore (CRO, peptide-linking in the CCD) with an
    entry is a pigment. Then amino acids by name or by the CCD type (peptide-linking components,
    so modified residues count as protein), waters and additives by name."""
    if code in library:
        return "pigment"
    if code in WATERS:
        return "water"
    if is_amino_acid(code):
        return "protein"
    if code in ADDITIVES:
        return "additive"
    return "unsupported"
