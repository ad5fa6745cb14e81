"""Bad input gives one clear line naming the file, atom or key and the fix (exit status 2 from
the CLI), never a traceback or a silent run. The expectations are common practice for command
line tools (POSIX: status 2 for misuse) and the chemistry's own rules (electron parity)."""
import pytest

from siteshift.cli import main

WATER = "O 0 0 0.1173\nH 0 0.7572 -0.4692\nH 0 -0.7572 -0.4692\n"
GAS = ["--gas", "--omega", "0.3", "--basis", "sto-3g", "--grid-level", "0"]


def _xyz(tmp_path, body, name="m.xyz"):
    p = tmp_path / name
    p.write_text(f"{body.count(chr(10))}\nbad\n{body}")
    return p


@pytest.mark.parametrize("body, extra, message", [
    (WATER.replace("0.7572 -0.4692", "0.7572 nan"), [], "atom 2 (H) has a non-finite"),
    (WATER, ["--charge", "30"], "charge +30 leaves -20 electrons"),
    (WATER.replace("H 0 -0.7572", "Xq 0 -0.7572"), [], "atom 3: unknown element 'Xq'"),
    (WATER, ["--basis", "sto-4q"], "basis 'sto-4q' is not known to PySCF"),
    (WATER, ["--multiplicity", "2"], "cannot have 2S = 1"),
    (WATER.replace("-0.7572 -0.4692", "-0.7572 9999.999"), [], "placeholder"),
    (WATER.replace("-0.7572 -0.4692", "-0.7572 5000.0"), [], "more than 50 Å from the rest"),
])
def test_excite_refuses_bad_molecules(tmp_path, capsys, body, extra, message):
    xyz = _xyz(tmp_path, body)
    assert main(["excite", str(xyz), *GAS, *extra]) == 2
    err = capsys.readouterr().err
    assert err.startswith("error: ") and message in err and "Traceback" not in err
    if "basis" not in message and "multiplicity" not in " ".join(extra):
        assert str(xyz) in err   # the file is named


def test_tune_refuses_a_misspelt_basis(tmp_path, capsys):
    assert main(["tune", str(_xyz(tmp_path, WATER)), "--basis", "def2-svq"]) == 2
    assert "basis 'def2-svq'" in capsys.readouterr().err


@pytest.mark.parametrize("text, message", [
    ("", "the file is empty"),
    ("hello world\n", "no ATOM or HETATM records"),
])
def test_unreadable_structures_are_named(tmp_path, capsys, text, message):
    pdb = tmp_path / "s.pdb"
    pdb.write_text(text)
    assert main(["inventory", str(pdb)]) == 2
    err = capsys.readouterr().err
    assert message in err and str(pdb) in err


@pytest.mark.parametrize("value, shown", [("     nan", "nan"), ("9999.999", "9999.999")])
def test_structure_with_unplaced_atom_is_refused(root, tmp_path, capsys, value, shown):
    lines = (root / "config/demo/pcd2_wt.pdb").read_text().splitlines(keepends=True)
    k = next(i for i, line in enumerate(lines) if line.startswith("HETATM"))
    lines[k] = lines[k][:30] + value + lines[k][38:]
    pdb = tmp_path / "s.pdb"
    pdb.write_text("".join(lines))
    assert main(["inventory", str(pdb)]) == 2
    err = capsys.readouterr().err
    assert "atom C1 of HC4 A101" in err and shown in err


def test_environment_goes_on_past_a_failing_pigment(root, tmp_path, capsys):
    # B_HC4101 loses a core atom: it is reported, A_HC4101 is still measured (exit 1: partial)
    lines = (root / "config/demo/pcd2_wt.pdb").read_text().splitlines(keepends=True)
    lines = [x for x in lines if not (x.startswith("HETATM") and x[17:20] == "HC4"
                                      and x[21] == "B" and x[12:16].strip() == "C2")]
    pdb = tmp_path / "s.pdb"
    pdb.write_text("".join(lines))
    out = tmp_path / "env.json"
    assert main(["environment", str(pdb), "--json", str(out)]) == 1
    io = capsys.readouterr()
    assert "A_HC4101" in io.out and "B_HC4101" in io.err and "failed" in io.err
    import json
    rec = {r["pigment_id"]: r for r in json.loads(out.read_text())}
    assert "dielectric" in rec["A_HC4101"] and "C2" in rec["B_HC4101"]["error"]

