"""A study config: cross-field checks (after JSON-Schema validation) and its translation into
settings objects (QM presets, environment, dielectric)."""
from __future__ import annotations

from pathlib import Path

from ..base.defaults import DEFAULT_NSTATES, FALLBACK_OMEGA, fill, preset
from ..environment.dielectric import DielectricModel
from ..environment.metrics import EnvironmentSettings
from ..qm.settings import ExciteSettings


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
    n2 = d.get("eps_optical", 2.0)
    if d.get("mode", "local") == "uniform" and d.get("eps_uniform", 4.0) < n2:
        raise ConfigError(f"config key 'dielectric.eps_uniform': {d.get('eps_uniform')} is below "
                          f"'dielectric.eps_optical' {n2} (a static ε is never below the optical "
                          "one); raise it, or lower eps_optical")
    if d.get("eps_min", 2.0) < n2:
        raise ConfigError(f"config key 'dielectric.eps_min': {d.get('eps_min')} is below "
                          f"'dielectric.eps_optical' {n2}, so apolar sites would have a static ε "
                          "below the optical one; raise eps_min, or lower eps_optical")
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
    import re
    dimers = {d[0] for d in (config.get("couplings") or {}).get("dimers", [])}
    for d in (config.get("couplings") or {}).get("dimers", []):
        if not re.fullmatch(r"[A-Za-z0-9_-]+", d[0]) or d[1] == d[2]:
            raise ConfigError(f"config key 'couplings.dimers': {d} needs a name of letters, "
                              "digits, '_' or '-' and two different pigment ids")
    for k, t in enumerate((config.get("sweep") or {}).get("targets", [])):
        if t.get("kind") in ("branch", "site") and not t.get("band"):
            raise ConfigError(f"config key 'sweep.targets[{k}]': kind {t['kind']} needs a band "
                              "(Qy, Qx, bright or S1)")
        if t.get("kind") == "dimer_splitting" and t.get("dimer") not in dimers:
            raise ConfigError(f"config key 'sweep.targets[{k}].dimer': {t.get('dimer')!r} is "
                              f"not in couplings.dimers {sorted(dimers)}")
    cp = config.get("couplings") or {}
    if (cp.get("enabled") and cp.get("site_energies") == "embedded"
            and not (config.get("electrostatics") or {}).get("enabled")):
        raise ConfigError("config key 'couplings.site_energies': embedded needs "
                          "electrostatics.enabled: true (or use auto/continuum)")
    _check_ions(config.get("ions") or {})
    return config


def _check_ions(ions: dict):
    ce = ions.get("coulomb_eps", "static")
    if isinstance(ce, str) and ce not in ("static", "optical"):
        raise ConfigError(f"config key 'ions.coulomb_eps': {ce!r} is neither static, optical "
                          "nor a number >= 1")
    if not isinstance(ce, str) and ce < 1.0:
        raise ConfigError(f"config key 'ions.coulomb_eps': {ce} < 1 (a dielectric constant)")
    names = [p[0] for p in ions.get("pairs", [])]
    for p in ions.get("pairs", []):
        if p[1] == p[2]:
            raise ConfigError(f"config key 'ions.pairs': pair {p[0]!r} has {p[1]} as donor and "
                              "acceptor; name two different pigments")
    if len(set(names)) != len(names):
        raise ConfigError(f"config key 'ions.pairs': names repeat ({names}); give each pair its "
                          "own name")


def _check_mutations(name, v, variants, root):
    """Mutations need a parent with its own (uncompressed PDB) file and must name residues that
    exist with the stated wild-type amino acid."""
    from ..structures.mutate import MutationError, parse_mutation
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


def qm_settings(qm: dict, eps_static=1.0, eps_optical=1.0, omega=None, nstates=None):
    """ExciteSettings from the config's `qm` section: schema defaults for keys it lacks, the
    preset's values for keys left null (nstates: the pigment type's before the preset's)."""
    qm = fill(qm, "qm")
    chosen = preset(qm["preset"])
    pick = lambda k: qm[k] if qm.get(k) is not None else chosen.get(k)  # noqa: E731
    # the config's own value, else the pigment type's (a heme needs its Q and Soret states;
    # 19HC's heme had neither among the demo preset's 3), else the preset's
    n = qm.get("nstates") or nstates or chosen.get("nstates") or DEFAULT_NSTATES
    return ExciteSettings(
        alpha=float(qm["alpha"]),
        omega=float(omega if omega is not None else qm["omega"] or FALLBACK_OMEGA),
        eps_static=float(eps_static), eps_optical=float(eps_optical),
        screen=qm["screen"], basis=pick("basis"),
        auxbasis=qm["auxbasis"], density_fitting=bool(qm["density_fitting"]),
        grid_level=int(pick("grid_level")), pcm_method=qm["pcm_method"],
        lebedev_order=int(pick("lebedev_order")), nstates=int(n), tda=bool(qm["tda"]),
        equilibrium=bool(qm["equilibrium"]), solver=qm["solver"],
        max_memory_mb=int(qm["max_memory_mb"]),
        df_storage=qm["df_storage"], pcm_fit=bool(qm["pcm_fit"]),
        df_pair_tol=float(qm["df_pair_tol"]),
        response_grid_level=pick("response_grid_level"),
        response_tol=float(qm["response_tol"]),
        occ_window_ev=pick("occ_window_ev"), vir_window_ev=pick("vir_window_ev"))


def tune_xatol(qm: dict) -> float:
    """The ω tolerance (bohr⁻¹): qm.tune.xatol, or the preset's when null."""
    qm = fill(qm, "qm")
    return float(qm["tune"]["xatol"] or preset(qm["preset"])["tune_xatol"])


def environment_settings(env: dict | None) -> EnvironmentSettings:
    env = dict(env or {})
    if "shells_A" in env:
        env["shells_A"] = tuple(env["shells_A"])
    env.pop("cluster_cutoff_A", None)
    return EnvironmentSettings(**env)


def dielectric_model(d: dict | None) -> DielectricModel:
    d = dict(d or {})
    m = DielectricModel(**{k: v for k, v in d.items() if k != "coefficients"},
                        coefficients={**DielectricModel().coefficients,
                                      **(d.get("coefficients") or {})})
    m.check()
    return m


def named_pigments(config: dict) -> list[tuple[str, str]]:
    """(config key, pigment id) of every pigment the config names."""
    out = []

    def triples(key, rows, cols):
        for k, row in enumerate(rows or []):
            for c in cols:
                if len(row) > c:
                    out.append((f"{key}[{k}]", str(row[c])))
    triples("branches.pairs", (config.get("branches") or {}).get("pairs"), (1, 2))
    cpl = config.get("couplings") or {}
    triples("couplings.dimers", cpl.get("dimers"), (1, 2))
    for g, ids in (cpl.get("groups") or {}).items():
        out += [(f"couplings.groups.{g}", str(i)) for i in ids or []]
    triples("ions.pairs", (config.get("ions") or {}).get("pairs"), (1, 2))
    out += [("sweep.pigments", str(i)) for i in (config.get("sweep") or {}).get("pigments") or []]
    for k, t in enumerate((config.get("sweep") or {}).get("targets") or []):
        if t.get("pigment"):
            out.append((f"sweep.targets[{k}].pigment", str(t["pigment"])))
    scan = ((config.get("electrostatics") or {}).get("scan") or {})
    out += [("electrostatics.scan.pigments", str(i)) for i in scan.get("pigments") or []]
    out += [(f"dielectric.overrides.{i}", str(i))
            for i in ((config.get("dielectric") or {}).get("overrides") or {})]
    out += [(f"pigment_overrides.{i}", str(i)) for i in config.get("pigment_overrides") or {}]
    return out


def check_study_pigments(config: dict, inventories: dict) -> list[str]:
    """After the inventories, before any QM: every pigment the config names exists in some
    variant, and every variant has a pigment to compute. Raise ConfigError naming the key (or
    the variant and its structure); return warnings for named pigments that failed (listed with
    their reason in every variant's inventory and the study summary).

    inventories: variant -> inventory table (pandas DataFrame, all rows, any status)."""
    codes = set(config.get("pigment_codes") or [])
    found, usable = {}, {}
    for v, df in inventories.items():
        rows = df.to_dict("records")
        for r in rows:
            found.setdefault(r["pigment_id"], {})[v] = r
        ok = [r for r in rows if r["status"] == "ok" and (not codes or r["ccd_code"] in codes)]
        usable[v] = ok
        if not ok:
            struct = (config["variants"][v].get("structure") or "its in-silico mutant")
            pig = [r for r in rows if r["status"] != "unsupported"]
            why = ("; ".join(f"{r['pigment_id']}: {r['status']} ({r['problems']})" for r in pig)
                   if pig else "no library pigment found")
            sel = f" among pigment_codes {sorted(codes)}" if codes else ""
            raise ConfigError(f"variant {v!r} ({struct}): no pigment to compute{sel}: {why}. "
                              "Check the structure, pigment_codes and the pigment library "
                              "(siteshift inventory STRUCTURE lists what is found)")
    warnings = []
    for key, pid in named_pigments(config):
        if pid not in found:
            present = sorted({p for v in usable.values() for p in (r["pigment_id"] for r in v)})
            raise ConfigError(f"config key '{key}': pigment {pid!r} is in no variant's "
                              f"inventory; computed pigments: {present}")
        bad = {v: r for v, r in found[pid].items()
               if r["status"] != "ok" or (codes and r["ccd_code"] not in codes)}
        for v, r in sorted(bad.items()):
            why = (f"{r['status']}: {r['problems']}" if r["status"] != "ok"
                   else f"{r['ccd_code']} not in pigment_codes")
            warnings.append(f"config key '{key}': pigment {pid} is not computed in variant {v} "
                            f"({why})")
    return sorted(set(warnings))

