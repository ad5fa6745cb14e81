#!/usr/bin/env python
"""Benchmark: how a heme's ground-state SCF converges: DIIS, ADIIS+DIIS, the second-order solver
and siteshift's own ladder.

The model is a heme of PDB entry 19HC (tests/data/19hc.pdb.gz) with its two axial His side chains
(siteshift's QM model; --state fe2: the Fe(II) singlet, fe3: the library's bis-His state,
Fe(III) low-spin doublet), or with --bare the heme alone (the model `siteshift electrostatics`
fits ESP charges to). Each mode runs from a PySCF guess (--guess) through siteshift's SCF object
(in-core fitted tensors, dense-grid XC) with --xc (pbe, or srsh: the default screened
functional, gas phase) and prints every cycle's energy and orbital gradient, then a summary row
appended to records/heme_scf.tsv:

    python scripts/benchmarks/heme_scf.py --basis sto-3g --grid-level 0 --xc pbe --modes diis,newton
    python scripts/benchmarks/heme_scf.py --bare --basis 6-31g --grid-level 1 --xc srsh \
        --modes adiis,ladder --conv-tol 1e-9

The measurements behind siteshift.qm.scf.SCF_LADDER_METAL (ADIIS+DIIS, then second order, for
d-block metals) came from these modes (2 threads).
"""
from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parents[1] / "scripts"))
sys.path.insert(0, str(HERE))


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--pigment", default="A_HEM301")
    ap.add_argument("--state", choices=("fe2", "fe3"), default="fe2")
    ap.add_argument("--bare", action="store_true",
                    help="the heme alone (the model `siteshift electrostatics` fits ESP charges "
                         "to), without its axial His")
    ap.add_argument("--guess", default="minao",
                    help="PySCF initial guess: minao, huckel, sap, atom, vsap, 1e")
    ap.add_argument("--basis", default="sto-3g")
    ap.add_argument("--grid-level", type=int, default=0)
    ap.add_argument("--xc", choices=("pbe", "srsh"), default="pbe")
    ap.add_argument("--modes", default="diis,newton",
                    help="diis, adiis (siteshift's AdiisDiis), newton, ladder (siteshift's "
                         "run_scf); comma-separated")
    ap.add_argument("--max-cycle", type=int, default=40)
    ap.add_argument("--conv-tol", type=float, default=1e-7,
                    help="SCF energy tolerance, Eh (|g| tolerance its square root; siteshift's "
                         "own jobs use 1e-9)")
    ap.add_argument("--threads", type=int, default=2)
    ap.add_argument("--out", default=str(HERE / "records" / "heme_scf.tsv"))
    args = ap.parse_args(argv)
    import numpy as np

    from response_speed import append_rows, provenance
    from siteshift.qm.scf import AdiisDiis, build_molecule, make_scf, run_scf
    from siteshift.qm.settings import ExciteSettings, configure_threads
    from siteshift.structures.inventory import model_for, pigment_residues
    from siteshift.structures.library import load_library
    from siteshift.structures.ligands import add_axial_ligands
    from siteshift.structures.reading import read_structure
    configure_threads(args.threads)
    lib = load_library()
    atoms = read_structure(HERE.parents[1] / "tests" / "data" / "19hc.pdb.gz")
    res = next(p for p in pigment_residues(atoms, lib)[0] if p.id == args.pigment)
    env = atoms[~np.isin(atoms.indices, res.atoms.indices)]
    m = model_for(res, lib)
    if not args.bare:
        m = add_axial_ligands(m, lib["HEM"], env, fixed_state=args.state == "fe2")
    mol = build_molecule(list(m.elements), np.asarray(m.coords), m.charge, m.multiplicity - 1,
                         args.basis)
    what = "alone" if args.bare else "+ axial ligands"
    print(f"{args.pigment} {what}: {len(m.elements)} atoms, {mol.nao} AOs, charge "
          f"{m.charge}, multiplicity {m.multiplicity}, guess {args.guess}", flush=True)
    prov = provenance()
    rows = []
    for mode in args.modes.split(","):
        s = ExciteSettings(basis=args.basis, grid_level=args.grid_level, omega=0.2)
        mf = make_scf(mol, s, solvated=False)
        mf.init_guess = args.guess
        if args.xc == "pbe":
            mf.xc = "pbe"
        mf.max_cycle, mf.conv_tol = args.max_cycle, args.conv_tol
        trace = []
        if mode == "ladder":   # siteshift's run_scf: the ladder it gives this molecule
            t = time.perf_counter()

            def log(m, t0=t):
                print(f"  ladder {time.perf_counter() - t0:6.0f} s {m}", flush=True)
                if "' cycle " in m:
                    trace.append((float(m.split("E=")[1].split()[0]),
                                  float(m.split("|g|=")[1].split(",")[0])))
            mf, step, _n = run_scf(mf, log=log, max_cycle=args.max_cycle)
            wall = time.perf_counter() - t
            rows.append({"date": time.strftime("%Y-%m-%d"), "pigment": args.pigment,
                         "state": args.state, "model": "bare" if args.bare else "his2",
                         "guess": args.guess, "basis": args.basis, "grid": args.grid_level,
                         "xc": args.xc, "conv_tol": args.conv_tol,
                         "mode": f"ladder ({step})",
                         "converged": bool(mf.converged), "cycles": len(trace),
                         "e_final_eh": round(float(mf.e_tot), 6),
                         "e_min_eh": round(min(e for e, _g in trace), 6),
                         "g_final": trace[-1][1], "wall_s": round(wall, 1),
                         "threads": args.threads, **prov})
            print(rows[-1], flush=True)
            continue
        mf = mf.newton() if mode == "newton" else mf
        if mode == "adiis":
            mf.DIIS = AdiisDiis

        def cb(env, trace=trace, t0=time.perf_counter()):
            trace.append((env["e_tot"], env.get("norm_gorb")))
            print(f"  {mode} {len(trace):3d} E={env['e_tot']:.6f} |g|={env.get('norm_gorb')} "
                  f"{time.perf_counter() - t0:.0f} s", flush=True)
        mf.callback = cb
        t = time.perf_counter()
        mf.kernel()
        wall = time.perf_counter() - t
        gs = [g for _e, g in trace if g is not None]
        rows.append({"date": time.strftime("%Y-%m-%d"), "pigment": args.pigment,
                     "state": args.state, "model": "bare" if args.bare else "his2",
                         "guess": args.guess, "basis": args.basis, "grid": args.grid_level,
                     "xc": args.xc, "conv_tol": args.conv_tol, "mode": mode,
                     "converged": bool(mf.converged),
                     "cycles": len(trace), "e_final_eh": round(float(mf.e_tot), 6),
                     "e_min_eh": round(min(e for e, _g in trace), 6),
                     "g_final": gs[-1] if gs else None, "wall_s": round(wall, 1),
                     "threads": args.threads, **prov})
        print(rows[-1], flush=True)
    append_rows(args.out, rows)


if __name__ == "__main__":
    main()
