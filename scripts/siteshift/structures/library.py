"""The pigment library: what siteshift knows about each pigment type, keyed by CCD code."""
from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import yaml

DEFAULT_LIBRARY = Path(__file__).resolve().parents[3] / "config" / "pigments.yaml"
FAMILIES = ("tetrapyrrole", "heme", "flavin", "retinal", "phenolic", "other")


class LibraryError(ValueError):
    pass


@dataclass(frozen=True)
class PigmentType:
    code: str
    name: str
    family: str
    charge: int
    multiplicity: int
    core: tuple
    cut_bonds: tuple = ()
    band_axes: dict = field(default_factory=dict)
    nstates: int = 4
    axial_ligand_atoms: dict = field(default_factory=dict)
    band_scheme: str = "axes"     # axes (Qy/Qx) or heme (Q and Soret); see siteshift.qm.bands
    ligation_states: dict = field(default_factory=dict)   # {"HIS+HIS": {charge, multiplicity}}
    links: tuple = ()             # covalent links to a protein residue (see config/pigments.yaml)
    drop_h: tuple = ()            # CCD hydrogens left out (a deprotonated form)
    dipole_strength_D2: dict = field(default_factory=dict)   # {band: measured D²}
    dipole_strength_source: str = ""

    @property
    def spin(self) -> int:
        """2S, PySCF's `spin`."""
        return self.multiplicity - 1


def _entry(code: str, d: dict, source: str) -> PigmentType:
    where = f"pigment library {source}, entry {code}"
    missing = [k for k in ("family", "charge", "multiplicity", "core") if k not in d]
    if missing:
        raise LibraryError(f"{where}: missing key(s) {missing}")
    if d["family"] not in FAMILIES:
        raise LibraryError(f"{where}: family {d['family']!r} not one of {FAMILIES}")
    if int(d["multiplicity"]) < 1:
        raise LibraryError(f"{where}: multiplicity must be >= 1")
    for b in d.get("cut_bonds", []) or []:
        if len(b) != 2:
            raise LibraryError(f"{where}: cut_bonds entries are [kept_atom, dropped_atom], got {b}")
    axes = {k: tuple(v) for k, v in (d.get("band_axes") or {}).items()}
    for k, v in axes.items():
        if len(v) != 2:
            raise LibraryError(f"{where}: band_axes.{k} must name two atoms, got {list(v)}")
    from ..base.defaults import BAND_SCHEMES as SCHEMES
    scheme = d.get("band_scheme") or ("heme" if d["family"] == "heme" else "axes")
    if scheme not in SCHEMES:
        raise LibraryError(f"{where}: band_scheme {scheme!r} not one of {SCHEMES}")
    states = {}
    for key, st in (d.get("ligation_states") or {}).items():
        if not isinstance(st, dict) or "charge" not in st or "multiplicity" not in st \
                or int(st["multiplicity"]) < 1:
            raise LibraryError(f"{where}: ligation_states.{key} needs charge and multiplicity "
                               f">= 1, got {st}")
        canon = "+".join(sorted(str(key).upper().split("+")))
        states[canon] = {"charge": int(st["charge"]), "multiplicity": int(st["multiplicity"]),
                         "note": str(st.get("note", ""))}
    links = []
    for k, ln in enumerate(d.get("links") or []):
        need = ("residue", "partner", "atom", "keep", "cut", "charge")
        lack = [x for x in need if x not in (ln or {})]
        if lack or len(ln["cut"]) != 2:
            raise LibraryError(f"{where}: links[{k}] lacks {lack or ['a two-atom cut']} "
                               f"(keys: {list(need)}, optional replaces, drop_h, partner_h, "
                               "max_A, note)")
        links.append({**ln, "residue": str(ln["residue"]).upper(),
                      "replaces": list(ln.get("replaces") or []),
                      "drop_h": list(ln.get("drop_h") or []),
                      "partner_h": int(ln.get("partner_h", 0)),
                      "max_A": float(ln.get("max_A", 1.9)), "charge": int(ln["charge"])})
    strengths = d.get("dipole_strength_D2") or {}
    if not isinstance(strengths, dict) or not all(
            isinstance(v, (int, float)) and not isinstance(v, bool) and v > 0
            for v in strengths.values()):
        raise LibraryError(f"{where}: dipole_strength_D2 must map band names to positive "
                           f"dipole strengths in D² (e.g. {{Qy: 37.1}}), got {strengths!r}")
    if strengths and not str(d.get("dipole_strength_source") or "").strip():
        raise LibraryError(f"{where}: dipole_strength_D2 needs dipole_strength_source (where "
                           "the measured value comes from)")
    return PigmentType(code=code, band_scheme=scheme,
                       dipole_strength_D2={str(k): float(v) for k, v in strengths.items()},
                       dipole_strength_source=str(d.get("dipole_strength_source") or ""), ligation_states=states, links=tuple(links),
                       drop_h=tuple(d.get("drop_h") or ()),
                       name=str(d.get("name", code)), family=d["family"],
                       charge=int(d["charge"]), multiplicity=int(d["multiplicity"]),
                       core=tuple(d["core"]),
                       cut_bonds=tuple(tuple(b) for b in d.get("cut_bonds", []) or []),
                       band_axes=axes, nstates=int(d.get("nstates", 4)),
                       axial_ligand_atoms={k: tuple(v) for k, v in
                                           (d.get("axial_ligand_atoms") or {}).items()})


def load_library(path=None, extra: dict | None = None) -> dict:
    """Load the library file (default: config/pigments.yaml) and merge study-level entries.

    extra: {CODE: {key: value}}; an entry for a known code updates only the keys it gives.
    """
    path = Path(path or DEFAULT_LIBRARY)
    try:
        raw = yaml.safe_load(path.read_text()) or {}
    except FileNotFoundError:
        raise LibraryError(f"pigment library {path} not found") from None
    for code, upd in (extra or {}).items():
        raw[code] = {**raw.get(code, {}), **(upd or {})}
    return {code.upper(): _entry(code.upper(), d, str(path)) for code, d in raw.items()}
