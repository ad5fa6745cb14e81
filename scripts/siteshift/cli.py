"""The `siteshift` command: single jobs and inspection outside the workflow.

    siteshift inventory STRUCTURE [--json FILE] [--tsv FILE]
    siteshift extract STRUCTURE PIGMENT_ID --outdir DIR
    siteshift environment STRUCTURE [--pigment ID] [--json FILE]
    siteshift excite XYZ --charge Q --spin S (--gas | --eps-static E --eps-optical N) ...
    siteshift tune XYZ --charge Q --spin S ...
"""
from __future__ import annotations

import argparse
import sys
from pathlib import Path

import numpy as np


def _library(args):
    from .structures.library import load_library
    return load_library(args.library)


def read_xyz(path):
    """Elements and Å coordinates of an XYZ file (extra columns after x y z are ignored)."""
    lines = Path(path).read_text().splitlines()
    try:
        n = int(lines[0].split()[0])
    except (IndexError, ValueError):
        raise SystemExit(f"error: {path} is not an XYZ file (first line must be the atom count)")
    el, xyz = [], []
    for k, line in enumerate(lines[2:2 + n], start=3):
        parts = line.split()
        try:
            el.append(parts[0])
            xyz.append([float(v) for v in parts[1:4]])
        except (IndexError, ValueError):
            raise SystemExit(f"error: {path} line {k}: expected 'element x y z', got {line!r}")
    if len(el) != n:
        raise SystemExit(f"error: {path} declares {n} atoms but holds {len(el)}")
    return el, np.array(xyz)


def cmd_inventory(args):
    from .structures.reading import read_structure
    from .structures.inventory import take_inventory
    atoms = read_structure(args.structure, args.altloc)
    rows = take_inventory(atoms, _library(args))
    print(f"{args.structure}: {len(atoms)} atoms (altloc policy {args.altloc})")
    print(f"{'pigment_id':<14s} {'code':<5s} {'chain':<5s} {'resid':>6s} {'atoms':>6s} "
          f"{'qm':>4s} {'formula':<14s} {'q':>3s} {'mult':>4s}  status / problems")
    for r in rows:
        print(f"{r['pigment_id']:<14s} {r['ccd_code']:<5s} {r['chain']:<5s} {r['resid']:>6d} "
              f"{r['n_atoms_read']:>6d} {r['n_atoms_qm']:>4d} {r['formula_qm']:<14s} "
              f"{'' if r['charge'] is None else r['charge']:>3} "
              f"{'' if r['multiplicity'] is None else r['multiplicity']:>4}  {r['status']}"
              f"{' - ' + r['problems'] if r['problems'] else ''}")
    if args.json:
        from .base.io import write_json
        write_json(args.json, {"structure": args.structure, "altloc": args.altloc,
                               "n_atoms": len(atoms), "pigments": rows})
    if args.tsv:
        import pandas as pd
        from .structures.inventory import INVENTORY_COLUMNS
        from .base.io import write_tsv
        write_tsv(args.tsv, pd.DataFrame(rows, columns=INVENTORY_COLUMNS))
    return 0


def cmd_extract(args):
    from .study.stages import extract_stage
    out = Path(args.outdir)
    rec = extract_stage(args.structure, args.pigment, out / "qm_model.xyz", out / "qm_model.json",
                        out / "cluster.pdb", library=_library(args), altloc=args.altloc,
                        cutoff_A=args.cutoff, axial_ligands=args.axial_ligands)
    print(f"{rec['pigment_id']}: {rec['formula']} ({rec['n_atoms']} atoms) -> {out}")
    return 0


def cmd_environment(args):
    from .environment.dielectric import DielectricModel
    from .structures.inventory import pigment_residues
    from .structures.reading import read_structure
    from .study.stages import measure_site
    lib = _library(args)
    atoms = read_structure(args.structure, args.altloc)
    pigs, _ = pigment_residues(atoms, lib)
    if args.pigment:
        pigs = [p for p in pigs if p.id == args.pigment]
        if not pigs:
            raise SystemExit(f"error: pigment {args.pigment} not found in {args.structure}")
    model = DielectricModel(mode=args.mode, exposed_medium=args.exposed_medium)
    out = []
    for r in pigs:
        metrics = measure_site(atoms, r, lib)
        d = model.assign(r.id, metrics)
        out.append({"pigment_id": r.id, "metrics": metrics, "dielectric": d})
        print(f"{r.id:<14s} eps_static={d['eps_static']:6.2f} eps_optical={d['eps_optical']:5.2f}"
              f"  burial={metrics['burial']:.2f} hydropathy={metrics['hydropathy']:+.2f} "
              f"polar={metrics['n_polar_atoms']} charged={metrics['n_charged_groups']} "
              f"waters={metrics['n_waters']} packing={metrics['packing_density']:.2f}")
    if args.json:
        from .base.io import write_json
        write_json(args.json, out)
    return 0


def _settings(args):
    from .qm.settings import ExciteSettings
    es, eo = (1.0, 1.0) if args.gas else (args.eps_static, args.eps_optical)
    if es is None or eo is None:
        raise SystemExit("error: give --gas or both --eps-static and --eps-optical")
    return ExciteSettings(alpha=args.alpha, omega=args.omega or 0.2, eps_static=es, eps_optical=eo,
                          screen=args.screen, basis=args.basis, grid_level=args.grid_level,
                          nstates=args.states, tda=not args.tddft, solver=args.solver,
                          pcm_method=args.pcm, lebedev_order=args.lebedev_order,
                          equilibrium=args.equilibrium, density_fitting=not args.no_df,
                          max_memory_mb=args.max_memory)


def cmd_excite(args):
    from .qm.excite import excite
    from .qm.tuning import tune_omega
    from .base.io import write_json
    el, xyz = read_xyz(args.xyz)
    s = _settings(args)
    log = (lambda m: print(m, file=sys.stderr)) if args.verbose else None
    tuned = None
    if args.tune:
        tuned = tune_omega(el, xyz, args.charge, args.spin, s, log=log)
        s.omega = tuned["omega_bohr_inv"]
    elif args.omega is None:
        raise SystemExit("error: give --omega W (bohr^-1) or --tune")
    res = excite(el, xyz, args.charge, args.spin, s, log=log)
    if tuned:
        res["tuning"] = tuned
    for st in res["states"]:
        print(f"S{st['index']:<2d} {st['energy_ev']:8.4f} eV {st['wavelength_nm']:8.1f} nm "
              f"f={st['oscillator_strength']:.4f} {st['band'] or ''}")
    if args.json:
        write_json(args.json, res)
    return 0


def cmd_tune(args):
    from .qm.tuning import tune_omega
    from .base.io import write_json
    el, xyz = read_xyz(args.xyz)
    args.gas, args.omega = True, None
    s = _settings(args)
    log = (lambda m: print(m, file=sys.stderr)) if args.verbose else None
    res = tune_omega(el, xyz, args.charge, args.spin, s, bounds=tuple(args.bounds),
                     xatol=args.xatol, include_anion=args.anion, log=log)
    for r in res["evaluations"]:
        print(f"omega={r['omega_bohr_inv']:.4f}  J^2={r['j2_ev2']:.6f} eV^2  IP={r['ip_ev']:.4f}"
              f"  -HOMO={-r['homo_ev']:.4f}")
    print(f"tuned omega = {res['omega_bohr_inv']:.4f} bohr^-1 (J = {res['j_ev']:.4f} eV)")
    if args.json:
        write_json(args.json, res)
    return 0


def _qm_args(p, excite=True):
    p.add_argument("xyz", help="XYZ file (Å)")
    p.add_argument("--charge", type=int, default=0)
    p.add_argument("--spin", type=int, default=0, help="2S: number of unpaired electrons")
    p.add_argument("--alpha", type=float, default=0.2, help="short-range exact exchange")
    p.add_argument("--basis", default="def2-svp")
    p.add_argument("--grid-level", type=int, default=3)
    p.add_argument("--states", type=int, default=4)
    p.add_argument("--screen", choices=["static", "optical"], default="static")
    p.add_argument("--pcm", choices=["IEF-PCM", "C-PCM"], default="IEF-PCM")
    p.add_argument("--lebedev-order", type=int, default=17)
    p.add_argument("--solver", choices=["fast", "stock"], default="fast")
    p.add_argument("--tddft", action="store_true", help="full TDDFT instead of TDA")
    p.add_argument("--equilibrium", action="store_true", help="equilibrium solvation")
    p.add_argument("--no-df", action="store_true", help="no density fitting")
    p.add_argument("--max-memory", type=int, default=4000, help="MB")
    p.add_argument("--json", help="write the result as JSON")
    p.add_argument("-v", "--verbose", action="store_true", help="progress on stderr")
    if excite:
        p.add_argument("--gas", action="store_true", help="gas phase (ε = 1)")
        p.add_argument("--eps-static", type=float)
        p.add_argument("--eps-optical", type=float)
        g = p.add_mutually_exclusive_group()
        g.add_argument("--omega", type=float, help="ω in bohr⁻¹")
        g.add_argument("--tune", action="store_true", help="tune ω first (gas phase)")


def main(argv=None):
    ap = argparse.ArgumentParser(prog="siteshift", description=__doc__,
                                 formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--library", help="pigment library YAML (default: config/pigments.yaml)")
    sub = ap.add_subparsers(dest="cmd", required=True)
    p = sub.add_parser("inventory", help="list the pigments of a structure")
    p.add_argument("structure")
    p.add_argument("--altloc", default="occupancy")
    p.add_argument("--json")
    p.add_argument("--tsv")
    p.set_defaults(func=cmd_inventory)
    p = sub.add_parser("extract", help="QM model and environment cluster of one pigment")
    p.add_argument("structure")
    p.add_argument("pigment")
    p.add_argument("--outdir", required=True)
    p.add_argument("--altloc", default="occupancy")
    p.add_argument("--cutoff", type=float, default=6.0, help="cluster cutoff (Å)")
    p.add_argument("--axial-ligands", action="store_true",
                   help="add metal-coordinating side chains to the QM model")
    p.set_defaults(func=cmd_extract)
    p = sub.add_parser("environment", help="environment metrics and dielectrics")
    p.add_argument("structure")
    p.add_argument("--pigment")
    p.add_argument("--altloc", default="occupancy")
    p.add_argument("--mode", choices=["local", "uniform"], default="local")
    p.add_argument("--exposed-medium", choices=["water", "vacuum"], default="water")
    p.add_argument("--json")
    p.set_defaults(func=cmd_environment)
    p = sub.add_parser("excite", help="one SRSH-PCM excited-state calculation")
    _qm_args(p)
    p.set_defaults(func=cmd_excite)
    p = sub.add_parser("tune", help="optimal tuning of ω (gas phase)")
    _qm_args(p, excite=False)
    p.add_argument("--bounds", type=float, nargs=2, default=[0.05, 0.6])
    p.add_argument("--xatol", type=float, default=0.01)
    p.add_argument("--anion", action="store_true", help="J² with the anion term")
    p.set_defaults(func=cmd_tune)
    ap.add_argument("--threads", type=int, default=None,
                    help="OpenMP threads for PySCF (default: all cores; BLAS stays single)")
    args = ap.parse_args(argv)
    if args.cmd in ("excite", "tune"):
        import os
        from .qm.settings import configure_threads
        configure_threads(args.threads or os.cpu_count() or 1)
    from .environment.dielectric import DielectricError
    from .qm.settings import EngineError
    from .structures.library import LibraryError
    from .structures.qmmodel import ModelError
    from .structures.reading import StructureError
    try:
        return args.func(args)
    except (StructureError, ModelError, EngineError, LibraryError, DielectricError) as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2


if __name__ == "__main__":
    sys.exit(main())
