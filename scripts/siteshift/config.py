"""Cross-field checks of a study config (after JSON-Schema validation)."""
from __future__ import annotations

from pathlib import Path


class ConfigError(ValueError):
    pass


def check_config(config: dict, root=".") -> dict:
    """Raise ConfigError naming the key and the fix; return the config unchanged."""
    variants = config.get("variants") or {}
    ref = config.get("reference")
    if ref not in variants:
        raise ConfigError(f"config key 'reference': {ref!r} is not one of the variants "
                          f"{sorted(variants)}")
    for name, v in variants.items():
        if v.get("parent") and v["parent"] not in variants:
            raise ConfigError(f"config key 'variants.{name}.parent': {v['parent']!r} is not a "
                              "variant")
        if v.get("mutations"):
            _check_mutations(name, v, variants, root)
            continue
        p = Path(root) / v["structure"]
        if not p.exists():
            raise ConfigError(f"config key 'variants.{name}.structure': file {p} does not exist")
    d = config.get("dielectric") or {}
    if d.get("eps_min", 2.0) > d.get("eps_max", 20.0):
        raise ConfigError("config keys 'dielectric.eps_min' > 'dielectric.eps_max'")
    for pid, ov in (d.get("overrides") or {}).items():
        if "eps_static" in ov and "eps_optical" in ov and ov["eps_optical"] > ov["eps_static"]:
            raise ConfigError(f"config key 'dielectric.overrides.{pid}': eps_optical "
                              f"{ov['eps_optical']} > eps_static {ov['eps_static']}")
    b = ((config.get("qm") or {}).get("tune") or {}).get("bounds", [0.1, 0.5])
    if b[0] >= b[1]:
        raise ConfigError(f"config key 'qm.tune.bounds': need lower < upper, got {b}")
    for trip in (config.get("branches") or {}).get("pairs", []):
        if trip[1] == trip[2]:
            raise ConfigError(f"config key 'branches.pairs': pair {trip[0]!r} names "
                              f"{trip[1]} twice")
    return config


def _check_mutations(name, v, variants, root):
    """Mutations need a parent with its own (uncompressed PDB) file and must name residues that
    exist with the stated wild-type amino acid."""
    from .mutate import MutationError, parse_mutation
    key = f"variants.{name}"
    if v.get("structure"):
        raise ConfigError(f"config key '{key}': give either structure or parent + mutations")
    parent = variants.get(v.get("parent"))
    if not parent or not parent.get("structure"):
        raise ConfigError(f"config key '{key}.parent': mutations need a parent variant with its "
                          "own structure file")
    path = Path(root) / parent["structure"]
    if not path.exists() or not str(path).lower().endswith((".pdb", ".ent")):
        raise ConfigError(f"config key '{key}.parent': in-silico mutations need the parent as an "
                          f"uncompressed PDB file, got {path}")
    import MDAnalysis as mda
    import warnings
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        u = mda.Universe(str(path))
    for text in v["mutations"]:
        try:
            chain, wt, num, _icode, _new = parse_mutation(text)
        except MutationError as exc:
            raise ConfigError(f"config key '{key}.mutations': {exc}") from None
        res = u.select_atoms(f"chainID {chain} and resid {num} and name CA")
        if len(res) == 0:
            raise ConfigError(f"config key '{key}.mutations': {text}: no residue {chain}:{num} "
                              f"in {path}")
        if res.resnames[0] != wt:
            raise ConfigError(f"config key '{key}.mutations': {text}: residue {chain}:{num} in "
                              f"{path} is {res.resnames[0]}, not {wt}")
