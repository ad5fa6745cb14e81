"""The `siteshift` command: single jobs and inspection outside the workflow.

    siteshift inventory STRUCTURE [--json FILE] [--tsv FILE]
    siteshift extract STRUCTURE PIGMENT_ID --outdir DIR
    siteshift environment STRUCTURE [--pigment ID] [--json FILE]
    siteshift excite XYZ --charge Q --multiplicity M (--gas | --eps-static E --eps-optical N) ...
    siteshift excite ... --point-charges FILE [--charge-scale S]   (embedded in charges)
    siteshift tune XYZ --charge Q --multiplicity M ...
    siteshift electrostatics STRUCTURE [--pigment ID] [--preset demo|full] --json FILE
    siteshift couple MODEL_A.json MODEL_B.json [--dimer] --json FILE
    siteshift ions MODEL.json [--eps-static E] [--unscreened] --json FILE

May import: every layer (base, structures, environment, qm, interactions, study); the top of
the stack, imported by nothing in the library.
"""
from __future__ import annotations

import argparse
import sys
from pathlib import Path

import numpy as np

from .inputs import InputError, check_xyz_job, read_xyz  # noqa: F401 (read_xyz: API)
from .pairs import add_pair_commands


def _library(args):
    from ..structures.library import load_library
    return load_library(args.library)


def cmd_inventory(args):
    from ..structures.reading import read_structure
    from ..structures.inventory import flag_interfaces, take_inventory
    chosen = {}
    atoms = read_structure(args.structure, args.altloc, report=chosen)
    library = _library(args)
    rows = take_inventory(atoms, library, altlocs=chosen, clash_A=args.clash,
                          on_clash=args.on_clash, rebuild_missing=not args.keep_partial)
    flag_interfaces(rows, atoms, library, args.structure, args.interface)
    print(f"{args.structure}: {len(atoms)} atoms (altloc policy {args.altloc}, per disorder "
          f"group; clashes under {args.clash} A: {args.on_clash})")
    print(f"{'pigment_id':<14s} {'code':<5s} {'chain':<5s} {'resid':>6s} {'atoms':>6s} "
          f"{'qm':>4s} {'formula':<14s} {'q':>3s} {'mult':>4s}  status / problems")
    for r in rows:
        print(f"{r['pigment_id']:<14s} {r['ccd_code']:<5s} {r['chain']:<5s} {r['resid']:>6d} "
              f"{r['n_atoms_read']:>6d} {r['n_atoms_qm']:>4d} {r['formula_qm']:<14s} "
              f"{'' if r['charge'] is None else r['charge']:>3} "
              f"{'' if r['multiplicity'] is None else r['multiplicity']:>4}  {r['status']}"
              f"{' [altloc ' + r['altlocs'] + ']' if r['altlocs'] else ''}"
              f"{' - ' + r['problems'] if r['problems'] else ''}")
    if args.json:
        from ..base.io import write_json
        write_json(args.json, {"structure": args.structure, "altloc": args.altloc,
                               "n_atoms": len(atoms), "pigments": rows})
    if args.tsv:
        import pandas as pd
        from ..structures.inventory import INVENTORY_COLUMNS
        from ..base.io import write_tsv
        write_tsv(args.tsv, pd.DataFrame(rows, columns=INVENTORY_COLUMNS))
    return 0


def cmd_extract(args):
    from ..study.stages import extract_stage
    out = Path(args.outdir)
    rec = extract_stage(args.structure, args.pigment, out / "qm_model.xyz", out / "qm_model.json",
                        out / "cluster.pdb", library=_library(args), altloc=args.altloc,
                        cutoff_A=args.cutoff, axial_ligands=args.axial_ligands)
    print(f"{rec['pigment_id']}: {rec['formula']} ({rec['n_atoms']} atoms) -> {out}")
    return 0


def cmd_environment(args):
    from ..environment.dielectric import DielectricModel
    from ..structures.inventory import pigment_residues
    from ..structures.reading import read_structure
    from ..study.stages import measure_site
    lib = _library(args)
    atoms = read_structure(args.structure, args.altloc)
    pigs, _ = pigment_residues(atoms, lib)
    if args.pigment:
        pigs = [p for p in pigs if p.id == args.pigment]
        if not pigs:
            raise InputError(f"pigment {args.pigment} not found in {args.structure}")
    from ..structures.qmmodel import ModelError
    model = DielectricModel(mode=args.mode, exposed_medium=args.exposed_medium)
    out, failed = [], []
    for r in pigs:
        try:   # one pigment that cannot be modelled is reported; the others go on
            metrics = measure_site(atoms, r, lib)
        except ModelError as exc:
            failed.append({"pigment_id": r.id, "error": str(exc)})
            print(f"{r.id:<14s} failed: {exc}", file=sys.stderr)
            continue
        d = model.assign(r.id, metrics)
        out.append({"pigment_id": r.id, "metrics": metrics, "dielectric": d})
        print(f"{r.id:<14s} eps_static={d['eps_static']:6.2f} eps_optical={d['eps_optical']:5.2f}"
              f"  burial={metrics['burial']:.2f} hydropathy={metrics['hydropathy']:+.2f} "
              f"polar={metrics['n_polar_atoms']} charged={metrics['n_charged_groups']} "
              f"waters={metrics['n_waters']} packing={metrics['packing_density']:.2f}")
    if args.json:
        from ..base.io import write_json
        write_json(args.json, out + failed)
    if failed:
        print(f"{len(failed)} of {len(pigs)} pigment(s) failed (listed above); the others were "
              "measured", file=sys.stderr)
        return 2 if not out else 1
    return 0


def _settings(args):
    """ExciteSettings from the options, through the same translation as the workflow's `qm:`
    section (schema defaults, then the preset, then what the options set)."""
    from ..study.config import qm_settings
    es, eo = (1.0, 1.0) if args.gas else (args.eps_static, args.eps_optical)
    if es is None or eo is None:
        raise InputError("give --gas or both --eps-static and --eps-optical")
    qm = {"preset": args.preset, "alpha": args.alpha, "basis": args.basis,
          "grid_level": args.grid_level, "density_fitting": not args.no_df,
          "max_memory_mb": args.max_memory}
    if hasattr(args, "solver"):  # continuum and response options (excite only)
        qm.update(nstates=args.states, tda=not args.tddft, solver=args.solver,
                  equilibrium=args.equilibrium, pcm_method=args.pcm,
                  lebedev_order=args.lebedev_order, screen=args.screen)
    return qm_settings(qm, es, eo, omega=args.omega)


def cmd_excite(args):
    from ..qm.excite import excite
    from ..qm.tuning import tune_omega
    from ..base.io import write_json
    el, xyz = read_xyz(args.xyz)
    s = _settings(args)
    check_xyz_job(args.xyz, el, xyz, args.charge, args.multiplicity)
    log = (lambda m: print(m, file=sys.stderr)) if args.verbose else None
    tuned = None
    if args.tune:
        tuned = tune_omega(el, xyz, args.charge, args.multiplicity - 1, s, log=log)
        s.omega = tuned["omega_bohr_inv"]
    elif args.omega is None:
        raise InputError("give --omega W (bohr^-1) or --tune")
    charges = None
    if args.point_charges:
        from ..qm.embedding import read_point_charges
        charges = read_point_charges(args.point_charges, scale=args.charge_scale)
    dm0 = start = None
    if args.start_from:
        from ..qm.scf import build_molecule
        from ..qm.warmstart import warm_density
        mol = build_molecule(el, xyz, args.charge, args.multiplicity - 1, s.basis)
        dm0, start = warm_density(mol, args.start_from, el, xyz, s.basis)
        print(f"SCF start: {start['kind']}"
              + (f" from {start['source']} (RMSD {start['rmsd_A']:.3f} Å)"
                 if start["kind"] == "warm" else f" ({start['reason']})"), file=sys.stderr)
    res = excite(el, xyz, args.charge, args.multiplicity - 1, s, log=log, charges=charges,
                 dm0=dm0, start=start)
    print(f"SCF: {res['scf_cycles']} cycles ({res['scf_start']['kind']} start), "
          f"{res['timings_s']['scf']:.1f} s", file=sys.stderr)
    if tuned:
        res["tuning"] = tuned
    for st in res["states"]:
        print(f"S{st['index']:<2d} {st['energy_ev']:8.4f} eV {st['wavelength_nm']:8.1f} nm "
              f"f={st['oscillator_strength']:.4f} {st['band'] or ''}")
    for w in res.get("band_warnings") or ():
        print(f"warning: band naming: {w}", file=sys.stderr)
    if res.get("embedding"):
        e = res["embedding"]
        print(f"embedded in {e['n_charges']} charges (total {e['total_charge_e']:+.3f} e, scale "
              f"{e['scale']:g}); QM-charge interaction {e['interaction_energy_ev']:+.4f} eV")
    if args.json:
        write_json(args.json, res)
    return 0


def cmd_electrostatics(args):
    from ..base.io import write_json
    from ..base.units import EV2CM1
    from ..study.electrostatics import survey_structure
    from ..study.stages import setup_logging
    if args.verbose:
        setup_logging()
    qm = {"preset": args.preset, "omega": args.omega}
    exact = args.exact_within if args.exact_within >= 0 else None    # negative: all exact
    el = {"ph": args.ph, "screening": args.screening, "smearing_A": args.smearing,
          "unknown_residues": args.unknown, "survey_exact_within_A": exact}
    res = survey_structure(args.structure, _library(args), qm, pigment=args.pigment,
                           eps_static=args.eps_static, eps_optical=args.eps_optical, el=el,
                           cache_dir=args.cache, altloc=args.altloc, top=args.top,
                           axial_ligands=args.axial_ligands)
    print(f"{res['structure']}: {res['n_atoms_charged']} charges (total "
          f"{res['total_charge_e']:+.2f} e); uniform continuum eps {res['eps_static']:g}/"
          f"{res['eps_optical']:g}; charges x {res['charge_scale']:.3f} ({res['screening']})")
    print(f"{'pigment_id':<14s} {'band':<7s} {'shift_meV':>10s} {'cm-1':>8s}  top residues (meV)")
    for p in res["pigments"]:
        for band, b in p["bands"].items():
            if band == "S1" and len(p["bands"]) > 1:
                continue
            top = ", ".join(f"{r['residue']} {r['shift_mev']:+.1f}" for r in b["residues"][:3])
            mev = b["shift_first_order_mev"]
            print(f"{p['pigment_id']:<14s} {band:<7s} {mev:>10.2f} {mev * EV2CM1 / 1000:>8.1f}"
                  f"  {top}")
    for code, ws in res.get("reference_warnings", {}).items():
        for w in ws:
            print(f"warning: {code}: {w}")
    flagged = [p["pigment_id"] for p in res["pigments"] if p.get("warnings")]
    if flagged:
        print(f"warning: {len(flagged)} pigment(s) with charges at bonding distance of the QM "
              f"model ({', '.join(flagged[:4])}{', ...' if len(flagged) > 4 else ''}): see "
              "their 'warnings' in the JSON")
    t = res["timings_s"]
    print(f"time: {t['total_s']:.1f} s (" + ", ".join(f"{k} {v}" for k, v in t.items()
                                                       if k != "total_s") + ")")
    if args.json:
        write_json(args.json, res)
    return 0


def cmd_tune(args):
    from ..qm.tuning import tune_omega
    from ..base.io import write_json
    from ..base.defaults import preset
    el, xyz = read_xyz(args.xyz)
    args.gas, args.omega = True, None
    s = _settings(args)
    check_xyz_job(args.xyz, el, xyz, args.charge, args.multiplicity)
    log = (lambda m: print(m, file=sys.stderr)) if args.verbose else None
    xatol = args.xatol if args.xatol is not None else preset(args.preset)["tune_xatol"]
    res = tune_omega(el, xyz, args.charge, args.multiplicity - 1, s, bounds=tuple(args.bounds),
                     xatol=xatol, include_anion=args.anion, log=log,
                     keep_orbitals=bool(args.save_orbitals))
    if args.save_orbitals:
        from ..qm.warmstart import save_orbitals
        w, neutral = res.pop("_neutral")
        save_orbitals(args.save_orbitals, neutral, el, xyz, s.basis,
                      f"tuning of {args.xyz} (omega {w:.4f} bohr^-1)")
    for r in res["evaluations"]:
        print(f"omega={r['omega_bohr_inv']:.4f}  J^2={r['j2_ev2']:.6f} eV^2  IP={r['ip_ev']:.4f}"
              f"  -HOMO={-r['homo_ev']:.4f}")
    print(f"tuned omega = {res['omega_bohr_inv']:.4f} bohr^-1 (J = {res['j_ev']:.4f} eV)")
    if args.json:
        write_json(args.json, res)
    return 0


def _qm_args(p, excite=True):
    """Options of one QM job; defaults from the study config's schema and the chosen preset
    (siteshift.base.defaults), so a single job and the workflow agree."""
    from ..base.defaults import QM_PRESETS, default
    qm = default("qm")
    p.add_argument("xyz", help="XYZ file (Å)")
    p.add_argument("--charge", type=int, default=0, help="total charge (e); default 0")
    p.add_argument("--multiplicity", type=int, default=1, metavar="M",
                   help="spin multiplicity 2S+1, as the pigment library's `multiplicity` "
                        "(default 1, a singlet)")
    p.add_argument("--preset", choices=sorted(QM_PRESETS), default=qm["preset"],
                   help="basis, grids, state count and ω tolerance unless set below: " + "; ".join(
                       f"{k}: {v['basis']}, grid {v['grid_level']}, Lebedev "
                       f"{v['lebedev_order']}" for k, v in QM_PRESETS.items())
                   + f" (default {qm['preset']})")
    p.add_argument("--alpha", type=float, default=qm["alpha"],
                   help=f"short-range exact-exchange fraction α (default {qm['alpha']})")
    p.add_argument("--basis", help="basis set (default: the preset's)")
    p.add_argument("--grid-level", type=int, help="PySCF DFT grid level 0-9 (default: preset)")
    p.add_argument("--no-df", action="store_true", help="no density fitting")
    p.add_argument("--max-memory", type=int, default=qm["max_memory_mb"],
                   help=f"PySCF memory budget in MB (default {qm['max_memory_mb']})")
    p.add_argument("--json", help="write the result as JSON to this file")
    if excite:   # continuum and response options (tuning runs in the gas phase)
        p.add_argument("--lebedev-order", type=int,
                       help="Lebedev order of the PCM atom spheres (default: preset)")
        p.add_argument("--screen", choices=["static", "optical"], default=qm["screen"],
                       help=f"which ε sets the long-range exchange 1/ε (default {qm['screen']})")
        p.add_argument("--pcm", choices=["IEF-PCM", "C-PCM"], default=qm["pcm_method"],
                       help=f"continuum model (default {qm['pcm_method']})")
        p.add_argument("--states", type=int,
                       help="excited states (default: the preset's, else 4)")
        p.add_argument("--solver", choices=["fast", "stock"], default=qm["solver"],
                       help=f"response solver (default {qm['solver']})")
        p.add_argument("--tddft", action="store_true", help="full TDDFT instead of TDA")
        p.add_argument("--equilibrium", action="store_true",
                       help="equilibrium solvation of the excitations (ε_static)")
        p.add_argument("--gas", action="store_true", help="gas phase (ε = 1)")
        p.add_argument("--eps-static", type=float, help="ε of the ground-state continuum")
        p.add_argument("--eps-optical", type=float,
                       help="ε of the continuum during the excitation (n²)")
        g = p.add_mutually_exclusive_group()
        g.add_argument("--omega", type=float, help="range separation ω in bohr⁻¹")
        g.add_argument("--tune", action="store_true", help="tune ω first (gas phase)")
        p.add_argument("--point-charges", metavar="FILE",
                       help="embed the QM in charges: whitespace columns x y z q (Å, e), an "
                            "optional fifth column a Gaussian width (Å); '#' comments")
        p.add_argument("--charge-scale", type=float, default=1.0, metavar="S",
                       help="multiply every charge by S (e.g. 1/ε to screen them; default 1)")


def _common(p):
    """Options every subcommand takes (after the subcommand, or before it)."""
    p.add_argument("--library", default=argparse.SUPPRESS,
                   help="pigment library YAML (default: config/pigments.yaml)")
    p.add_argument("--threads", type=int, default=argparse.SUPPRESS,
                   help="OpenMP threads for PySCF (default: all cores; BLAS stays single)")
    p.add_argument("-v", "--verbose", action="store_true", default=argparse.SUPPRESS,
                   help="progress on stderr")


def build_parser() -> argparse.ArgumentParser:
    """The command's parser (every default from the study config's schema and presets)."""
    from ..base.defaults import FALLBACK_OMEGA, QM_PRESETS, default
    ap = argparse.ArgumentParser(prog="siteshift", description=__doc__,
                                 formatter_class=argparse.RawDescriptionHelpFormatter)
    _common(ap)
    ap.set_defaults(library=None, threads=None, verbose=False)
    sub = ap.add_subparsers(dest="cmd", required=True)
    altloc = default("altloc")

    def add(name, help_):
        p = sub.add_parser(name, help=help_, description=help_)
        _common(p)
        return p

    p = add("inventory", "list the pigments of a structure")
    p.add_argument("structure", help="PDB or mmCIF file (optionally .gz)")
    p.add_argument("--altloc", default=altloc,
                   help=f"altloc policy: occupancy, first, or a letter (default {altloc})")
    p.add_argument("--json", help="write the inventory as JSON to this file")
    p.add_argument("--tsv", help="write the inventory as TSV to this file")
    clash = default("structure_checks.clash_A")
    p.add_argument("--clash", type=float, default=clash,
                   help=f"pigment-environment heavy-atom clash distance, Å (default {clash})")
    p.add_argument("--on-clash", choices=("error", "warn"),
                   default=default("structure_checks.on_clash"),
                   help="a clash makes the pigment an error (default) or a noted problem")
    iface = default("structure_checks.interface_cutoff_A")
    p.add_argument("--interface", type=float, default=iface,
                   help="flag pigments this close (Å) to an assembly copy the file lacks "
                        f"(default {iface}; 0: off)")
    p.add_argument("--keep-partial", action="store_true",
                   help="flag pigments missing non-core atoms as partial instead of rebuilding "
                        "the atoms from the CCD")
    p.set_defaults(func=cmd_inventory)
    p = add("extract", "QM model and environment cluster of one pigment")
    p.add_argument("structure", help="PDB or mmCIF file (optionally .gz)")
    p.add_argument("pigment", help="pigment id, e.g. A_BCL302")
    p.add_argument("--outdir", required=True, help="folder for qm_model.xyz/.json, cluster.pdb")
    p.add_argument("--altloc", default=altloc, help=f"altloc policy (default {altloc})")
    cut = default("extract.cluster_cutoff_A")
    p.add_argument("--cutoff", type=float, default=cut,
                   help=f"cluster cutoff in Å (default {cut})")
    axial = default("extract.axial_ligands")
    p.add_argument("--axial-ligands", action=argparse.BooleanOptionalAction, default=axial,
                   help="add the metal's coordinating side chains and waters to the QM model "
                        f"(default {'on' if axial else 'off'}; every donor is reported)")
    p.set_defaults(func=cmd_extract)
    p = add("environment", "environment metrics and dielectrics (exit 1 if some pigments "
                            "failed, each listed; 2 if none could be measured)")
    p.add_argument("structure", help="PDB or mmCIF file (optionally .gz)")
    p.add_argument("--pigment", help="only this pigment id (default: all)")
    p.add_argument("--altloc", default=altloc, help=f"altloc policy (default {altloc})")
    diel = default("dielectric")
    p.add_argument("--mode", choices=["local", "uniform"], default=diel["mode"],
                   help=f"dielectric model (default {diel['mode']})")
    p.add_argument("--exposed-medium", choices=["water", "vacuum"],
                   default=diel["exposed_medium"],
                   help=f"what faces the exposed surface (default {diel['exposed_medium']})")
    p.add_argument("--json", help="write the metrics and dielectrics as JSON to this file")
    p.set_defaults(func=cmd_environment)
    p = add("excite", "one SRSH-PCM excited-state calculation")
    _qm_args(p)
    p.add_argument("--start-from", metavar="ORBITALS.npz",
                   help="start the SCF from orbitals saved by `tune --save-orbitals` for the "
                        "same atoms in the same order (any orientation; cold start, with the "
                        "reason, when they do not fit)")
    p.set_defaults(func=cmd_excite)
    p = add("tune", "optimal tuning of ω (gas phase)")
    _qm_args(p, excite=False)
    tune = default("qm.tune")
    p.add_argument("--bounds", type=float, nargs=2, default=tune["bounds"],
                   metavar=("LOW", "HIGH"),
                   help=f"ω search interval in bohr⁻¹ (default {tune['bounds']})")
    p.add_argument("--xatol", type=float,
                   help="ω tolerance in bohr⁻¹ (default: the preset's)")
    p.add_argument("--anion", action="store_true", default=tune["include_anion"],
                   help="J² with the anion term")
    p.add_argument("--save-orbitals", metavar="ORBITALS.npz",
                   help="keep the neutral's orbitals at the tuned ω (warm start of `excite "
                        "--start-from` on other copies or geometries of this molecule)")
    p.set_defaults(func=cmd_tune)
    p = add("electrostatics", "first-order electrostatic shift of every pigment, by residue")
    el = default("electrostatics")
    p.add_argument("structure", help="PDB or mmCIF file (optionally .gz)")
    p.add_argument("--pigment", help="only this pigment id (default: all)")
    p.add_argument("--preset", choices=sorted(QM_PRESETS), default=default("qm.preset"),
                   help="QM preset of the difference densities and ESP fits (default "
                        f"{default('qm.preset')})")
    p.add_argument("--omega", type=float, help="ω in bohr⁻¹ (default: the untuned "
                   f"{FALLBACK_OMEGA})")
    p.add_argument("--eps-static", type=float, help="uniform continuum of the difference "
                   f"densities (default {default('dielectric.eps_uniform')})")
    p.add_argument("--eps-optical", type=float, help="its optical ε (default "
                   f"{default('dielectric.eps_optical')})")
    p.add_argument("--screening", choices=["none", "optical", "static"],
                   default=el["screening"], help="ε dividing the charges' field (default "
                   f"{el['screening']})")
    p.add_argument("--ph", type=float, default=el["ph"],
                   help=f"pH of the protonation states (default {el['ph']})")
    p.add_argument("--smearing", type=float, default=el["smearing_A"],
                   help=f"Gaussian width of the charges in Å (default {el['smearing_A']})")
    p.add_argument("--exact-within", type=float, default=el["survey_exact_within_A"],
                   help="charges this close (Å) to a QM atom get exact integrals, farther ones "
                        "the fitted density's potential; a negative value keeps all exact "
                        f"(default {el['survey_exact_within_A']})")
    p.add_argument("--unknown", choices=["error", "neutral"], default=el["unknown_residues"],
                   help="a residue without a charge source: stop, or leave it uncharged")
    p.add_argument("--altloc", default=altloc, help=f"altloc policy (default {altloc})")
    axial = default("extract.axial_ligands")
    p.add_argument("--axial-ligands", action=argparse.BooleanOptionalAction, default=axial,
                   help="add the metal-coordinating side chains to each QM model (default "
                        f"{'on' if axial else 'off'}, as the workflow's extract.axial_ligands; "
                        "without them their charges sit next to the metal, flagged)")
    p.add_argument("--top", type=int, default=el["top_residues"],
                   help=f"residues listed per pigment (default {el['top_residues']})")
    p.add_argument("--cache", default="siteshift_cache",
                   help="folder keeping difference densities and ESP charges between calls "
                        "(default ./siteshift_cache)")
    p.add_argument("--json", help="write the shifts and residue contributions as JSON")
    p.set_defaults(func=cmd_electrostatics)
    add_pair_commands(add)
    return ap


def main(argv=None):
    args = build_parser().parse_args(argv)
    if args.cmd in ("excite", "tune", "electrostatics", "couple", "ions"):
        import os
        from ..qm.settings import configure_threads
        configure_threads(args.threads or os.cpu_count() or 1)
    from ..environment.charges import ChargeError
    from ..environment.dielectric import DielectricError
    from ..qm.settings import EngineError
    from ..structures.library import LibraryError
    from ..structures.qmmodel import ModelError
    from ..structures.reading import StructureError
    try:
        return args.func(args)
    except (StructureError, ModelError, EngineError, LibraryError, DielectricError,
            ChargeError, InputError) as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2


if __name__ == "__main__":
    sys.exit(main())
