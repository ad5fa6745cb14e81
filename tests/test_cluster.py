"""A tiny study through Snakemake's cluster-generic executor with a simulated scheduler: every job
is its own submission (a background process started by a local submit script)."""
import subprocess
import sys
import time

import pandas as pd
import pytest
import yaml

from test_workflow import _tiny_config

pytest.importorskip("snakemake_executor_plugin_cluster_generic")

SUBMIT = """#!/usr/bin/env bash
# simulated scheduler: record the submission, start the job script in the background, print an id
jobscript="${@: -1}"
echo "$(date +%s.%N) $jobscript" >> "$(dirname "$0")/submissions.log"
nohup bash "$jobscript" > /dev/null 2>&1 &
echo "sim-$!"
"""


def test_jobs_run_as_separate_submissions(root, tmp_path):
    cfg = _tiny_config(root)
    del cfg["variants"]["A_I6E"]
    cfg["electrostatics"]["enabled"] = False   # the continuum-only DAG: its jobs counted below
    cfg["couplings"]["enabled"] = False
    cfg["ions"]["enabled"] = False
    (tmp_path / "config").mkdir()
    (tmp_path / "config/config.yaml").write_text(yaml.safe_dump(cfg))
    sub = tmp_path / "submit.sh"
    sub.write_text(SUBMIT)
    sub.chmod(0o755)
    t0 = time.perf_counter()
    p = subprocess.run([sys.executable, "-m", "snakemake", "-s", str(root / "Snakefile"),
                        "--directory", str(tmp_path), "--executor", "cluster-generic",
                        "--cluster-generic-submit-cmd", str(sub), "--jobs", "4",
                        "--latency-wait", "10"], capture_output=True, text=True, timeout=1200)
    wall = time.perf_counter() - t0
    assert p.returncode == 0, (p.stdout + p.stderr)[-4000:]
    subs = (tmp_path / "submissions.log").read_text().splitlines()
    # inventory, 2 × extract, 2 × environment, 2 × excite, environment table, shift tables,
    # plots: 10 submissions (rules `all` and `summarize_study` run locally)
    assert len(subs) == 10, subs
    assert len({s.split()[1] for s in subs}) == 10  # a job script per submission
    sites = pd.read_csv(tmp_path / "results/tables/site_energies.tsv", sep="\t")
    assert set(sites.pigment_id) == {"A_HC4101", "B_HC4101"}
    print(f"simulated-cluster study: {wall:.1f} s wall, {len(subs)} submissions")
