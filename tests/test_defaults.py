"""One source of defaults (the config schema and the presets), read alike by the library, the
CLI and the workflow; and the PySCF version guard of the QM layer."""
import os
import subprocess
import sys
from dataclasses import asdict, fields

import pytest

from siteshift.base.defaults import QM_PRESETS, default, fill
from siteshift.environment.dielectric import DielectricModel
from siteshift.environment.metrics import EnvironmentSettings
from siteshift.qm.settings import ExciteSettings
from siteshift.study.config import qm_settings


def test_library_defaults_are_the_schema_defaults():
    qm = default("qm")
    s = ExciteSettings()
    for k in ("alpha", "screen", "auxbasis", "density_fitting", "pcm_method", "tda",
              "equilibrium", "solver", "response_tol", "max_memory_mb", "df_storage",
              "df_pair_tol", "pcm_fit"):
        assert getattr(s, k) == qm[k], k
    for k in ("basis", "grid_level", "lebedev_order"):
        assert getattr(s, k) == QM_PRESETS["full"][k], k
    env = default("environment")
    e = asdict(EnvironmentSettings())
    for k, v in env.items():
        assert e[k] == v, k
    d = DielectricModel()
    diel = default("dielectric")
    for k in ("mode", "eps_min", "eps_max", "eps_uniform", "eps_optical", "exposed_medium"):
        assert getattr(d, k) == diel[k], k
    assert d.coefficients == diel["coefficients"]


def test_empty_qm_section_gives_the_default_settings():
    # the workflow (config filled by the schema), the library (ExciteSettings()) and an empty
    # section through qm_settings agree field by field
    assert qm_settings({}) == ExciteSettings()
    assert qm_settings(fill({}, "qm")) == ExciteSettings()


def test_fill_keeps_what_is_given_and_fills_nested_sections():
    q = fill({"alpha": 0.3, "tune": {"xatol": 0.01}}, "qm")
    assert q["alpha"] == 0.3 and q["tune"]["xatol"] == 0.01
    assert q["tune"]["bounds"] == default("qm.tune.bounds") and q["preset"] == "full"
    with pytest.raises(KeyError, match="qm.nonsense"):
        default("qm.nonsense")


def _parse(argv):
    """The CLI's parsed options (without running the command)."""
    from siteshift.cli import build_parser
    return vars(build_parser().parse_args(argv))


def test_cli_defaults_are_the_schema_defaults(tmp_path):
    from siteshift.cli import _settings
    xyz = str(tmp_path / "x.xyz")
    a = _parse(["tune", xyz])
    assert a["bounds"] == default("qm.tune.bounds")
    assert a["anion"] == default("qm.tune.include_anion")
    e = _parse(["excite", xyz, "--gas"])
    assert e["alpha"] == default("qm.alpha") and e["max_memory"] == default("qm.max_memory_mb")
    import argparse
    assert _settings(argparse.Namespace(**e)) == ExciteSettings()
    env = _parse(["environment", "x.pdb"])
    assert env["mode"] == default("dielectric.mode")
    assert _parse(["extract", "x.pdb", "A_X1", "--outdir", "d"])["cutoff"] == \
        default("extract.cluster_cutoff_A")
    # options after the subcommand (they used to work only before it)
    assert _parse(["excite", xyz, "--gas", "--threads", "1", "--library", "lib.yaml"])[
        "threads"] == 1


def test_untested_pyscf_is_refused():
    from siteshift.qm import TESTED_PYSCF, UntestedPySCF, check_pyscf_version
    import pyscf
    assert check_pyscf_version() == pyscf.__version__
    for bad in ("2.13.1", "2.15.0", "3.0.0"):
        with pytest.raises(UntestedPySCF, match=TESTED_PYSCF.replace("<", ".").replace(">", ".")):
            check_pyscf_version(bad)


def test_untested_pyscf_stops_the_qm_layer_at_import(root):
    # a process whose PySCF reports another release cannot import the QM layer at all
    code = ("import pyscf; pyscf.__version__ = '2.99.0'; import sys; "
            "sys.path.insert(0, 'scripts'); import siteshift.qm.excite")
    env = {k: v for k, v in os.environ.items() if k != "SITESHIFT_ALLOW_UNTESTED_PYSCF"}
    r = subprocess.run([sys.executable, "-c", code], cwd=root, capture_output=True, text=True,
                       env=env)
    assert r.returncode != 0 and "PySCF 2.99.0 is installed" in r.stderr


def test_pyproject_pins_the_tested_range(root):
    import tomllib
    from siteshift.qm import TESTED_PYSCF
    deps = tomllib.loads((root / "pyproject.toml").read_text())["project"]["dependencies"]
    pins = [d.split("#")[0].strip() for d in deps if d.startswith("pyscf")]
    assert pins == ["pyscf" + TESTED_PYSCF]


def test_every_settings_field_is_documented_or_internal():
    # a new ExciteSettings field needs a schema key (or is one of the per-job inputs below)
    internal = {"omega", "eps_static", "eps_optical", "basis", "grid_level", "lebedev_order",
                "nstates", "conv_tol"}
    qm = default("qm")
    missing = [f.name for f in fields(ExciteSettings) if f.name not in qm and
               f.name not in internal]
    assert not missing, f"ExciteSettings fields without a schema key: {missing}"
