"""Config validation: schema and cross-field checks stop bad studies before any job."""
import copy

import jsonschema
import pytest
import yaml

from siteshift.study.config import ConfigError, check_config


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
