# Helpers and input functions shared by the rules.
import sys
from pathlib import Path

sys.path.insert(0, str(Path(workflow.basedir) / "scripts"))

from snakemake.logging import logger  # noqa: E402

from siteshift.study.config import check_config  # noqa: E402
from siteshift.base.defaults import RUN_ONLY_QM_KEYS  # noqa: E402

check_config(config, Path.cwd())

RESULTS = "results"
LOGS = "logs"
# Snakemake's per-job timings (benchmark: files); the benchmark scripts' measured rows are
# tracked apart, in scripts/benchmarks/records/
BENCH = f"{RESULTS}/benchmarks"
VARIANTS = sorted(config["variants"])
REFERENCE = config["reference"]
QM = config["qm"]
# qm keys that change how a job runs, not its numbers: kept out of the rules' params (a changed
# param reruns the job) and read by the job scripts from the config (siteshift.study.stages.job_qm)
QM_PARAMS = {k: v for k, v in QM.items() if k not in RUN_ONLY_QM_KEYS}
# ω tuning is a gas-phase ground-state job: continuum and response keys do not reach it
QM_TUNING_PARAMS = {
    k: v
    for k, v in QM_PARAMS.items()
    if k not in ("equilibrium", "gas_phase", "lebedev_order", "nstates", "occ_window_ev",
                 "vir_window_ev", "pcm_fit", "pcm_method", "response_grid_level",
                 "response_tol", "screen", "solver", "tda")
}
SWEEP = config["sweep"]
ELECTRO = config["electrostatics"]
COUPLINGS = config["couplings"]
# dimers computed whole: name -> (pigment_a, pigment_b)
DIMERS = {name: (a, b) for name, a, b in COUPLINGS["dimers"]}


wildcard_constraints:
    variant="[A-Za-z0-9][A-Za-z0-9._-]*",
    pigment="[A-Za-z0-9]+_[A-Z0-9]{1,5}-?[0-9]+[A-Za-z]?",
    code="[A-Z0-9]{1,5}",
    dimer="[A-Za-z0-9_-]+",


def structure_of(wildcards):
    """The structure a variant is read from: its own file, or its in-silico mutant."""
    v = config["variants"][wildcards.variant]
    if v.get("mutations"):
        return f"{RESULTS}/{wildcards.variant}/structure.pdb"
    return v["structure"]


def parent_structure(wildcards):
    v = config["variants"][wildcards.variant]
    return config["variants"][v["parent"]]["structure"]


_STUDY_CHECKED = []


def check_inventories():
    """Once every variant's inventory exists, before any QM: the pigments the config names
    exist and every variant has one to compute (else stop, naming the key or the variant);
    named pigments that failed are warned about here and listed in the study summary."""
    if _STUDY_CHECKED:
        return
    import pandas as pd
    from siteshift.study.config import check_study_pigments

    tables = {
        v: pd.read_csv(checkpoints.take_inventory.get(variant=v).output.tsv, sep="\t",
                       keep_default_na=False)
        for v in VARIANTS
    }
    for w in check_study_pigments(config, tables):
        logger.warning(f"WARNING: {w}")
    _STUDY_CHECKED.append(True)


def inventory_rows(variant):
    """Pigment rows (status ok, codes selected) of a variant, read after the checkpoint."""
    import pandas as pd

    check_inventories()
    path = checkpoints.take_inventory.get(variant=variant).output.tsv
    df = pd.read_csv(path, sep="\t", keep_default_na=False)
    df = df[df.status == "ok"]
    codes = config["pigment_codes"]
    if codes:
        df = df[df.ccd_code.isin(codes)]
    return df


def pigments_of(variant):
    return list(inventory_rows(variant).pigment_id)


def code_of(variant, pigment):
    """CCD code of a pigment, from the inventory (ids alone are ambiguous: codes hold digits)."""
    df = inventory_rows(variant)
    return df[df.pigment_id == pigment].ccd_code.iloc[0]


def tuning_model(wildcards):
    """The QM model that ω is tuned on: first pigment of that type in the reference variant."""
    df = inventory_rows(REFERENCE)
    ids = list(df[df.ccd_code == wildcards.code].pigment_id)
    if not ids:
        raise ValueError(
            f"no pigment of type {wildcards.code} in the reference variant {REFERENCE}; "
            "set qm.omega or add the pigment to the reference")
    return f"{RESULTS}/{REFERENCE}/pigments/{ids[0]}/qm_model.json"


def tuning_input(wildcards):
    if QM["omega"]:
        return []
    return f"{RESULTS}/tuning/{code_of(wildcards.variant, wildcards.pigment)}.json"


def same_site_result(wildcards):
    """The same pigment's result in the reference variant, whose orbitals start a variant's
    site SCF (qm.warm_start: reference); nothing for the reference itself, for a pigment the
    reference lacks, or with qm.warm_start: tuning."""
    if QM.get("warm_start", "reference") != "reference" or wildcards.variant == REFERENCE:
        return []
    if wildcards.pigment not in pigments_of(REFERENCE):
        return []
    return f"{RESULTS}/{REFERENCE}/pigments/{wildcards.pigment}/excited_states.json"


def all_excitations(wildcards):
    return [
        f"{RESULTS}/{v}/pigments/{p}/excited_states.json"
        for v in VARIANTS
        for p in pigments_of(v)
    ]


def all_environments(wildcards):
    return [
        f"{RESULTS}/{v}/pigments/{p}/environment.json"
        for v in VARIANTS
        for p in pigments_of(v)
    ]


def _basis_estimate(model_json):
    """Rough basis size of a QM model: ~14 functions per heavy atom, 5 per H (def2-SVP-like);
    several models (a dimer) add up."""
    import json

    if isinstance(model_json, (list, tuple)) or hasattr(model_json, "__iter__") and not \
            isinstance(model_json, str):
        sizes = [_basis_estimate(m) for m in model_json]
        return sum(sizes) if sizes and None not in sizes else None
    try:
        els = json.loads(Path(model_json).read_text())["elements"]
    except (OSError, ValueError, KeyError):
        return None
    return 14 * sum(e != "H" for e in els) + 5 * sum(e == "H" for e in els)


def _qm_models(input):
    """The QM model file(s) of a job: `model`, or `models` for a dimer."""
    return getattr(input, "model", None) or list(getattr(input, "models", []))


def qm_mem_mb(wildcards, input, attempt):
    """Memory scaled by model size: two density-fitted 3-index tensors (full and long range) of
    ~3 nao auxiliary functions, nao²/2 pairs, 8 bytes, plus 1.5 GB; at least the PySCF budget
    × 1.5; doubled on a retry."""
    floor = QM["max_memory_mb"] * 1.5
    nao = _basis_estimate(_qm_models(input))
    est = 1500 + 2 * 3 * nao ** 3 / 2 * 8 / 1e6 if nao else floor
    return int(max(floor, est) * attempt)


def qm_runtime(wildcards, input, attempt):
    """Minutes scaled by model size (cubic in the basis), doubled on a retry."""
    nao = _basis_estimate(_qm_models(input))
    return int((10 + 2 * (nao / 100) ** 3 if nao else 240) * attempt)


def sweep_pigments(variant):
    chosen = SWEEP["pigments"]
    return [p for p in pigments_of(variant) if not chosen or p in chosen]


def all_sweeps(wildcards):
    """Every pigment's ε sweep, every dimer's (couplings.dimers) in the variants that have
    both pigments, and with the ion stage every pigment's IP/EA sweep."""
    out = [
        f"{RESULTS}/{v}/pigments/{p}/eps_sweep.json"
        for v in VARIANTS
        for p in sweep_pigments(v)
    ] + [
        f"{RESULTS}/{v}/dimers/{name}.eps_sweep.json"
        for v in VARIANTS
        for name, pair in DIMERS.items()
        if set(pair) <= set(pigments_of(v))
    ]
    if config["ions"]["enabled"]:
        out += [
            f"{RESULTS}/{v}/pigments/{p}/ion_sweep.json"
            for v in VARIANTS
            for p in sweep_pigments(v)
        ]
    return out


def all_site_results(wildcards):
    """Every site calculation the site tables read: continuum-only, and embedded when the
    electrostatics stage is on."""
    return all_excitations(wildcards) + (all_embedded(wildcards) if ELECTRO["enabled"] else [])


def all_embedded(wildcards):
    return [
        f"{RESULTS}/{v}/pigments/{p}/excited_embedded.json"
        for v in VARIANTS
        for p in pigments_of(v)
    ]


def scan_pigments():
    """Reference pigments the mutation scan covers: those listed, else every pigment of a
    configured branch pair, else every pigment."""
    chosen = ELECTRO["scan"]["pigments"]
    pids = pigments_of(REFERENCE)
    if chosen:
        return [p for p in pids if p in chosen]
    paired = {x for _n, a, b in config["branches"]["pairs"] for x in (a, b)}
    return [p for p in pids if p in paired] or pids


def all_scans(wildcards):
    return [f"{RESULTS}/{REFERENCE}/pigments/{p}/mutation_scan.json" for p in scan_pigments()]


def charge_fit_model(wildcards):
    """The QM model a pigment type's charges are fitted on: its first copy found in the
    reference variant (else in any variant)."""
    for v in [REFERENCE] + [x for x in VARIANTS if x != REFERENCE]:
        df = all_inventory_rows(v)
        ids = list(df[df.ccd_code == wildcards.code].pigment_id)
        if ids:
            return f"{RESULTS}/{v}/pigments/{ids[0]}/qm_model.json"
    raise ValueError(f"no pigment of type {wildcards.code} in any variant")


def charge_fit_tuning(wildcards):
    """The tuned ω of the type when the study tunes it, else none (the configured ω)."""
    tuned = set(config["pigment_codes"]) or None
    if QM["omega"] or (tuned is not None and wildcards.code not in tuned):
        return []
    return f"{RESULTS}/tuning/{wildcards.code}.json"


def pigment_charge_fits(wildcards):
    """ESP charges of every library pigment type present in the variant (all copies carry
    charges in each other's environment, computed or not)."""
    codes = sorted(set(all_inventory_rows(wildcards.variant).ccd_code))
    return [f"{RESULTS}/charges/pigments/{c}.json" for c in codes]


def all_inventory_rows(variant):
    """Pigment rows with a usable QM model (status ok), whatever pigment_codes selects."""
    import pandas as pd

    path = checkpoints.take_inventory.get(variant=variant).output.tsv
    df = pd.read_csv(path, sep="\t", keep_default_na=False)
    return df[df.status == "ok"]


def summary_results(wildcards):
    """Every QM result the study summary counts: site results, ions, and tuning runs."""
    out = all_site_results(wildcards)
    if config["ions"]["enabled"]:
        out += all_ions(wildcards)
    if not QM["omega"]:
        codes = sorted({c for v in VARIANTS for c in inventory_rows(v).ccd_code})
        out += [f"{RESULTS}/tuning/{c}.json" for c in codes]
    return out


def optional_targets():
    """Outputs of optional stages that `all` asks for when they are switched on."""
    out = []
    if ELECTRO["enabled"]:
        out += [f"{RESULTS}/tables/electrostatics.tsv", f"{RESULTS}/plots/residue_contributions.png"]
    if COUPLINGS["enabled"]:
        out += [f"{RESULTS}/tables/couplings.tsv", f"{RESULTS}/plots/exciton_spectra.png"]
    if SWEEP["enabled"]:
        out += [f"{RESULTS}/tables/eps_sweep.tsv", f"{RESULTS}/tables/eps_targets.tsv"]
    if config["ions"]["enabled"]:
        out += [f"{RESULTS}/tables/ion_pairs.tsv", f"{RESULTS}/plots/ion_ladder.png"]
    return out


# couplings stage


def _site_file(variant, pigment):
    mode = COUPLINGS["site_energies"]
    embedded = mode == "embedded" or (mode == "auto" and ELECTRO["enabled"])
    name = "excited_embedded.json" if embedded else "excited_states.json"
    return f"{RESULTS}/{variant}/pigments/{pigment}/{name}"


def coupled_site_result(wildcards):
    """The site calculation whose transitions couple: the embedded one when electrostatics is
    on (couplings.site_energies: auto or embedded), else the continuum-only one."""
    return _site_file(wildcards.variant, wildcards.pigment)


def variant_site_files(kind):
    """Input function: one file per site of the variant (site result, transitions or
    environment)."""

    def files(wildcards):
        pids = pigments_of(wildcards.variant)
        if kind == "site":
            return [_site_file(wildcards.variant, p) for p in pids]
        name = {"transitions": "transitions.npz", "environment": "environment.json"}[kind]
        return [f"{RESULTS}/{wildcards.variant}/pigments/{p}/{name}" for p in pids]

    return files


def all_dimers(wildcards):
    """Every configured dimer in every variant that has both pigments."""
    out = []
    for v in VARIANTS:
        pids = set(pigments_of(v))
        for name, (a, b) in DIMERS.items():
            if a in pids and b in pids:
                out.append(f"{RESULTS}/{v}/dimers/{name}.json")
    return out


def dimer_tuning(wildcards):
    if QM["omega"]:
        return []
    a = DIMERS[wildcards.dimer][0]
    return f"{RESULTS}/tuning/{code_of(wildcards.variant, a)}.json"


# charge-separated-state stage

IONS = config["ions"]


def ion_charges(wildcards):
    """The structure's charges when electrostatics is on (the ions are then embedded like the
    site calculation), else nothing."""
    if ELECTRO["enabled"]:
        return f"{RESULTS}/{wildcards.variant}/charges.tsv"
    return []


def ion_site_start(wildcards):
    """The site calculation whose ground state is the ions' neutral (same ε, functional and
    charges): the embedded one when electrostatics is on, else the continuum-only one. Its
    density in the QM cache starts the neutral's SCF."""
    name = "excited_embedded.json" if ELECTRO["enabled"] else "excited_states.json"
    return f"{RESULTS}/{wildcards.variant}/pigments/{wildcards.pigment}/{name}"


def all_ions(wildcards):
    return [
        f"{RESULTS}/{v}/pigments/{p}/ions.json"
        for v in VARIANTS
        for p in pigments_of(v)
    ]


def all_ion_site_results(wildcards):
    """The site results whose lowest excitation is each donor's E(D*)."""
    return [_site_file(v, p) for v in VARIANTS for p in pigments_of(v)]


def gap_codes():
    """Pigment types of the gap check: every computed type of the reference variant."""
    return sorted(set(inventory_rows(REFERENCE).ccd_code))


def all_gaps(wildcards):
    if not IONS["gap_check"]["enabled"]:
        return []
    return [f"{RESULTS}/gaps/{code}.json" for code in gap_codes()]


def gap_environment(wildcards):
    """The environment of the pigment whose model the gap check of a type runs on."""
    return str(tuning_model(wildcards)).replace("qm_model.json", "environment.json")


def gap_tuning(wildcards):
    if QM["omega"]:
        return []
    return f"{RESULTS}/tuning/{wildcards.code}.json"
