"""Config validation: schema and cross-field checks stop bad studies before any job."""
import copy

import jsonschema
import pytest
import yaml

from siteshift.study.config import ConfigError, check_config, check_study_pigments


@pytest.fixture(scope="module")
def schema(root):
    return yaml.safe_load((root / "config/schemas/config.schema.yaml").read_text())


@pytest.fixture
def cfg(root):
    return yaml.safe_load((root / "config/config.yaml").read_text())


def test_demo_config_is_valid(schema, cfg, root):
    jsonschema.validate(cfg, schema)
    check_config(cfg, root)


@pytest.mark.parametrize("path,value,match", [
    (("qm", "preset"), "huge", "huge"),
    (("dielectric", "eps_min"), 0.5, "0.5"),
    (("qm", "screen"), "both", "both"),
    (("altloc",), "highest", "highest"),
])
def test_schema_rejects_bad_values(schema, cfg, path, value, match):
    c = copy.deepcopy(cfg)
    d = c
    for k in path[:-1]:
        d = d[k]
    d[path[-1]] = value
    with pytest.raises(jsonschema.ValidationError, match=match):
        jsonschema.validate(c, schema)


def test_every_schema_key_is_described(schema):
    def walk(node, where):
        for k, v in (node.get("properties") or {}).items():
            assert "description" in v or v.get("type") == "object", f"{where}.{k}"
            if isinstance(v, dict):
                walk(v, f"{where}.{k}")
    walk(schema, "config")


def test_cross_field_errors_name_the_key(cfg, root):
    c = copy.deepcopy(cfg)
    c["reference"] = "nope"
    with pytest.raises(ConfigError, match="reference"):
        check_config(c, root)
    c = copy.deepcopy(cfg)
    c["variants"]["wt"]["structure"] = "config/demo/missing.pdb"
    with pytest.raises(ConfigError, match=r"variants\.wt\.structure"):
        check_config(c, root)
    c = copy.deepcopy(cfg)
    c["qm"]["tune"]["bounds"] = [0.5, 0.1]
    with pytest.raises(ConfigError, match=r"qm\.tune\.bounds"):
        check_config(c, root)


def test_static_eps_below_optical_is_refused(cfg, root):
    # ε_static ≥ ε_optical = n² for any medium (the optical response is part of the static one;
    # common practice, e.g. Tomasi, Mennucci, Cammi, Chem. Rev. 105, 2999 (2005)): the config is
    # refused rather than silently capped
    c = copy.deepcopy(cfg)
    c["dielectric"].update(mode="uniform", eps_uniform=1.5, eps_optical=2.0)
    with pytest.raises(ConfigError, match=r"'dielectric\.eps_uniform': 1\.5 is below"):
        check_config(c, root)
    c = copy.deepcopy(cfg)
    c["dielectric"].update(eps_min=1.8, eps_optical=2.0)
    with pytest.raises(ConfigError, match=r"'dielectric\.eps_min'"):
        check_config(c, root)


def test_override_eps_optical_above_the_site_names_the_key():
    from siteshift.environment.dielectric import DielectricError, DielectricModel
    model = DielectricModel(mode="uniform", eps_uniform=3.0,
                            overrides={"A_HC4101": {"eps_optical": 3.5}})
    with pytest.raises(DielectricError, match=r"dielectric\.overrides\.A_HC4101\.eps_optical"):
        model.assign("A_HC4101", {})


def _inventory(*rows):
    import pandas as pd
    cols = ["pigment_id", "ccd_code", "status", "problems"]
    return pd.DataFrame([dict(zip(cols, r)) for r in rows], columns=cols)


def test_named_pigments_must_exist_and_variants_need_a_pigment(cfg):
    ok = _inventory(("A_HC4101", "HC4", "ok", ""), ("B_HC4101", "HC4", "ok", ""))
    assert check_study_pigments(cfg, {"wt": ok, "A_I6E": ok}) == []
    c = copy.deepcopy(cfg)
    c["ions"]["pairs"].append(["x", "A_HC4101", "C_HC4101"])
    with pytest.raises(ConfigError, match=r"'ions\.pairs\[2\]': pigment 'C_HC4101' is in no"):
        check_study_pigments(c, {"wt": ok, "A_I6E": ok})
    # a pigment that failed in one variant: a warning naming the key, the variant and why
    failed = _inventory(("A_HC4101", "HC4", "ok", ""),
                        ("B_HC4101", "HC4", "error", "core atom(s) C9 missing"))
    w = check_study_pigments(cfg, {"wt": ok, "A_I6E": failed})
    assert any("branches.pairs[0]" in x and "variant A_I6E" in x and "C9 missing" in x for x in w)
    # a structure with nothing to compute stops the study, naming the variant and why
    with pytest.raises(ConfigError, match=r"variant 'A_I6E'.*no pigment to compute.*C9 missing"):
        check_study_pigments(cfg, {"wt": ok, "A_I6E": _inventory(
            ("B_HC4101", "HC4", "error", "core atom(s) C9 missing"))})
    with pytest.raises(ConfigError, match="no library pigment found"):
        check_study_pigments(cfg, {"wt": ok, "A_I6E": _inventory()})

