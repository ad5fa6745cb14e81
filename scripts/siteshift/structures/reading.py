"""Reading structures (PDB / mmCIF, gzipped or not) and finding pigments in them."""
from __future__ import annotations

import warnings
from dataclasses import dataclass
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


def read_structure(path, altloc: str = "occupancy", model: int = 0):
    """Read a structure with MDAnalysis and return an AtomGroup with one altloc per residue.

    altloc: "occupancy" keeps, per residue, the alternate location with the highest summed
    occupancy (ties: alphabetical first); "first" keeps the alphabetically first; a single letter
    keeps that label. Atoms without an altloc are always kept. Applied before anything else, since
    bonds guessed across altlocs are wrong.
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
    keep = select_altlocs(atoms, altloc)
    return atoms[keep]


def select_altlocs(atoms, policy: str = "occupancy") -> np.ndarray:
    """Boolean mask of atoms kept under an altloc policy (see :func:`read_structure`)."""
    alt = np.asarray(atoms.altLocs).astype(str)
    alt = np.where(np.isin(alt, ["", " ", "."]), "", alt)
    if policy not in ALTLOC_POLICIES and not (len(policy) == 1 and policy.isalnum()):
        raise StructureError(f"altloc policy {policy!r} not one of {ALTLOC_POLICIES} or a letter")
    occ = np.asarray(atoms.occupancies, dtype=float) if hasattr(atoms, "occupancies") \
        else np.ones(len(atoms))
    keep = alt == ""
    resindex = atoms.resindices
    for r in np.unique(resindex[~keep]):
        sel = (resindex == r) & ~keep
        labels = sorted(set(alt[sel]))
        if policy == "occupancy":
            totals = {lab: occ[sel & (alt == lab)].sum() for lab in labels}
            best = max(labels, key=lambda lab: (totals[lab], -labels.index(lab)))
        elif policy == "first":
            best = labels[0]
        else:
            best = policy if policy in labels else labels[0]
        keep |= sel & (alt == best)
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


def classify(code: str, library: dict) -> str:
    """'pigment', 'protein', 'water', 'additive' or 'unsupported' (a ligand not in the library)."""
    if code in library:
        return "pigment"
    if code in AMINO_ACIDS:
        return "protein"
    if code in WATERS:
        return "water"
    if code in ADDITIVES:
        return "additive"
    return "unsupported"
