"""The `siteshift` command on real and tiny inputs."""
import json

import pytest

from siteshift.cli import main, read_xyz


def test_inventory_19hc(hc19_path, tmp_path, capsys):
    out = tmp_path / "inv.json"
    assert main(["inventory", str(hc19_path), "--json", str(out)]) == 0
    text = capsys.readouterr().out
    assert text.count("HEM") >= 18 and "A_HEM301" in text and "B_HEM309" in text
    d = json.loads(out.read_text())
    assert sum(p["ccd_code"] == "HEM" for p in d["pigments"]) == 18


def test_extract_and_environment(root, tmp_path, capsys):
    pdb = root / "config/demo/pcd2_wt.pdb"
    assert main(["extract", str(pdb), "B_HC4101", "--outdir", str(tmp_path)]) == 0
    assert read_xyz(tmp_path / "qm_model.xyz")[0].count("H") == 8
    assert "HOH" in (tmp_path / "cluster.pdb").read_text()
    assert main(["environment", str(pdb), "--json", str(tmp_path / "env.json")]) == 0
    rows = json.loads((tmp_path / "env.json").read_text())
    assert {r["pigment_id"] for r in rows} == {"A_HC4101", "B_HC4101"}


def test_excite_water(tmp_path, capsys):
    xyz = tmp_path / "w.xyz"
    xyz.write_text("3\nwater\nO 0 0 0.1173\nH 0 0.7572 -0.4692\nH 0 -0.7572 -0.4692\n")
    out = tmp_path / "r.json"
    rc = main(["excite", str(xyz), "--eps-static", "4", "--eps-optical", "2", "--omega", "0.3",
               "--basis", "sto-3g", "--grid-level", "0", "--states", "2", "--lebedev-order", "5",
               "--json", str(out)])
    assert rc == 0
    r = json.loads(out.read_text())
    assert r["eps_response_used"] == 2.0 and len(r["states"]) == 2
    assert "eV" in capsys.readouterr().out


def test_tune_saves_orbitals_and_excite_starts_from_them(tmp_path, capsys):
    # the orbitals of the tuning run start the SCF of the same molecule turned and moved;
    # the excitation energies are those of the cold start within the SCF tolerance (PySCF
    # converges both to 1e-9 Eh)
    w = tmp_path / "w.xyz"
    w.write_text("3\nwater\nO 0 0 0.1173\nH 0 0.7572 -0.4692\nH 0 -0.7572 -0.4692\n")
    turned = tmp_path / "t.xyz"   # turned 90° about z and moved 5 Å
    turned.write_text("3\nwater\nO 5 0 0.1173\nH 4.2428 0 -0.4692\nH 5.7572 0 -0.4692\n")
    orb = tmp_path / "w.npz"
    opts = ["--basis", "sto-3g", "--grid-level", "0"]
    assert main(["tune", str(w), *opts, "--bounds", "0.25", "0.35", "--xatol", "0.05",
                 "--save-orbitals", str(orb)]) == 0
    assert orb.exists()
    run = ["excite", str(turned), "--eps-static", "4", "--eps-optical", "2", "--omega", "0.3",
           *opts, "--states", "2", "--lebedev-order", "5"]
    capsys.readouterr()
    assert main([*run, "--json", str(tmp_path / "cold.json")]) == 0
    assert "cold start" in capsys.readouterr().err
    assert main([*run, "--start-from", str(orb), "--json", str(tmp_path / "warm.json")]) == 0
    err = capsys.readouterr().err
    assert "SCF start: warm from tuning of" in err and "RMSD 0.000" in err
    cold, warm = (json.loads((tmp_path / f"{k}.json").read_text()) for k in ("cold", "warm"))
    assert warm["scf_start"]["kind"] == "warm" and warm["scf_cycles"] < cold["scf_cycles"]
    for a, b in zip(cold["states"], warm["states"]):
        assert abs(a["energy_ev"] - b["energy_ev"]) < 1e-5


def test_clear_errors(tmp_path, capsys):
    bad = tmp_path / "bad.xyz"
    bad.write_text("two\n\n")
    assert main(["excite", str(bad), "--gas", "--omega", "0.3"]) == 2
    assert "not an XYZ file" in capsys.readouterr().err
    assert main(["inventory", str(tmp_path / "missing.pdb")]) == 2
    assert "does not exist" in capsys.readouterr().err
    xyz = tmp_path / "w.xyz"
    xyz.write_text("3\nwater\nO 0 0 0.1173\nH 0 0.7572 -0.4692\nH 0 -0.7572 -0.4692\n")
    assert main(["excite", str(xyz), "--eps-static", "2", "--eps-optical", "3", "--omega",
                 "0.3", "--basis", "sto-3g"]) == 2
    assert "exceeds eps_static" in capsys.readouterr().err
