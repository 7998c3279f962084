"""TOML specs and the command line: bundled specs run, bad input gives one clear line."""

import json
import subprocess
import sys
from pathlib import Path

import pytest

import bvpkit
from bvpkit import SpecError
from bvpkit.io.cli import main
from bvpkit.io.spec import loads
from bvpkit.status import Status, failures_page, failures_table

ROOT = Path(__file__).resolve().parent.parent
SPECS = sorted((ROOT / "specs").glob("*.toml"))

GOOD = """
title = "test"
[problem]
domain = [0, 1]
equations = ["y'' = -y"]
conditions = ["y(0) = 0", "y'(0) = 1"]
[outputs]
end_value = "y(1)"
"""


def test_there_are_bundled_specs():
    assert len(SPECS) >= 4


@pytest.mark.parametrize("path", SPECS, ids=lambda p: p.stem)
def test_every_bundled_spec_solves(path, capsys):
    assert main(["solve", str(path)]) == 0
    out = capsys.readouterr().out
    assert out.startswith(bvpkit.load(path).title)
    assert "solved" in out


def test_bundled_specs_give_the_analytic_answers():
    # plate: friction coefficient 2 f''(0)/sqrt(Re_x), f''(0) from Boyd 1999
    plate = bvpkit.solve(bvpkit.load(ROOT / "specs/plate_boundary_layer.toml"))
    assert plate.outputs["friction_coefficient"] == pytest.approx(2 * 0.3320573362151963 / 8.0e4**0.5, rel=1e-8)
    # cantilever: q L^4 / (8 EI) and q L^2 / 2 (analytic, strength-of-materials handbooks)
    beam = bvpkit.solve(bvpkit.load(ROOT / "specs/cantilever_shelf.toml"))
    assert beam.outputs["tip_deflection_m"] == pytest.approx(1500 * 1.2**4 / (8 * 9.0e4), rel=1e-9)
    assert beam.outputs["root_moment_Nm"] == pytest.approx(1500 * 1.2**2 / 2, rel=1e-9)
    # fin: efficiency tanh(mL)/(mL), m^2 = 4h/(kD) (analytic)
    import math

    m = math.sqrt(4 * 40 / (200 * 0.005))
    fin = bvpkit.solve(bvpkit.load(ROOT / "specs/pin_fin.toml"))
    assert fin.outputs["efficiency"] == pytest.approx(math.tanh(m * 0.08) / (m * 0.08), rel=1e-9)


def test_spec_settings_are_carried_and_options_override(tmp_path):
    p = loads(GOOD + "[solver]\ntol = 1e-9\nmethod = \"collocation\"\n")
    assert p.settings["tol"] == 1e-9 and p.settings["method"] == "collocation"
    sol = bvpkit.solve(p)
    assert sol.outputs["end_value"] == pytest.approx(0.8414709848078965, rel=1e-8)  # analytic: sin(1)


@pytest.mark.parametrize(
    ("text", "message"),
    [
        ("[problem\n", "not valid TOML"),
        ("title = 'x'\n", "missing key 'problem'"),
        (GOOD.replace("domain", "domian"), "unknown key 'problem.domian' .*did you mean 'domain'.*known keys in problem: "
         "independent, domain"),
        (GOOD + "[solver]\ntol = 'small'\n", "solver.tol"),
        (GOOD + "[solver]\nverify = 1\n", "solver.verify"),
        (GOOD.replace("[0, 1]", "[0, 1, 2]"), "problem.domain"),
        (GOOD.replace("y'' = -y", "y'' = -yy"), r"<spec>: \[problem\] equation 1 .*unknown name 'yy'.*did you mean 'y'"),
        (GOOD.replace("y'' = -y", "y'' = -y$"), r"unexpected character '\$' at column 9 of: y'' = -y\$"),
        (GOOD + "[colours]\nred = 1\n", "unknown key 'colours'"),
    ],
)
def test_bad_specs_name_the_key_and_what_was_expected(text, message):
    with pytest.raises(SpecError, match=message):
        loads(text)


def test_spec_files_errors_name_the_file(tmp_path):
    with pytest.raises(SpecError, match="no such file"):
        bvpkit.load(tmp_path / "missing.toml")
    big = tmp_path / "big.toml"
    big.write_text("# " + "x" * 2_000_000)
    with pytest.raises(SpecError, match="limited to"):
        bvpkit.load(big)
    binary = tmp_path / "bin.toml"
    binary.write_bytes(b"\xff\xfe")
    with pytest.raises(SpecError, match="not UTF-8"):
        bvpkit.load(binary)


def _write(tmp_path, text, name="case.toml"):
    path = tmp_path / name
    path.write_text(text)
    return str(path)


def test_cli_exit_codes_and_one_line_errors(tmp_path, capsys):
    assert main(["check", _write(tmp_path, GOOD)]) == 0
    assert "d(y')/dt = -y" in capsys.readouterr().out
    bad = _write(tmp_path, GOOD.replace("y(0) = 0", "y(1.5) = 0"), "bad.toml")
    assert main(["solve", bad]) == Status.BAD_INPUT.exit_code
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "lies outside the domain" in err and "Traceback" not in err
    hard = GOOD.replace("y'' = -y", "1e-4*y'' + y' = 0").replace("y'(0) = 1", "y(1) = 1")
    code = main(["solve", _write(tmp_path, hard, "hard.toml"), "--max-nodes", "20", "--tol", "1e-9",
                 "--method", "collocation"])
    assert code == Status.MESH_LIMIT.exit_code


def test_cli_json_is_valid_on_success_and_failure(tmp_path, capsys):
    assert main(["solve", _write(tmp_path, GOOD), "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["success"] and data["outputs"]["end_value"] == pytest.approx(0.8414709848, rel=1e-8)  # analytic: sin(1)
    assert main(["solve", str(tmp_path / "nothing.toml"), "--json"]) == 2
    data = json.loads(capsys.readouterr().out)
    assert data == {"success": False, "status": "bad_input", "message": data["message"]}
    assert "no such file" in data["message"]


def test_cli_set_csv_and_save_paths(tmp_path, capsys, monkeypatch):
    monkeypatch.chdir(tmp_path)
    spec = _write(tmp_path, GOOD.replace("y'' = -y", "y'' = -w**2*y") + "[problem.constants]\nw = 1.0\n")
    assert main(["solve", spec, "--set", "w=2", "--csv", "out.csv"]) == 0
    lines = (tmp_path / "out.csv").read_text().splitlines()
    assert lines[0] == "x,y,y'"
    line = [l for l in capsys.readouterr().out.splitlines() if "end_value =" in l][0]
    assert float(line.split()[2]) == pytest.approx(0.4546487134128409, rel=1e-7)  # analytic: sin(2)/2
    assert main(["solve", spec, "--set", "w"]) == 2
    escaping = _write(tmp_path, GOOD + "[save]\nsolution_csv = \"../escape.csv\"\n", "esc.toml")
    assert main(["solve", escaping]) == 2
    assert "outside the working directory" in capsys.readouterr().err
    absolute = _write(tmp_path, GOOD + "[save]\nreport_json = \"/tmp/abs.json\"\n", "abs.toml")
    assert main(["solve", absolute]) == 2
    saving = _write(tmp_path, GOOD + "[save]\nreport_json = \"report.json\"\n", "save.toml")
    assert main(["solve", saving]) == 0
    assert json.loads((tmp_path / "report.json").read_text())["success"] is True
    assert main(["solve", saving]) == 2  # exists: refused without --overwrite
    assert "--overwrite" in capsys.readouterr().err
    assert main(["solve", saving, "--overwrite"]) == 0


def test_console_entry_point_runs_in_a_fresh_process():
    result = subprocess.run(
        [sys.executable, "-m", "bvpkit", "solve", str(ROOT / "specs/cantilever_shelf.toml")],
        capture_output=True, text=True, timeout=120,
    )
    assert result.returncode == 0, result.stderr
    assert "tip_deflection_m = 0.00432" in result.stdout


def test_failures_page_matches_the_status_list():
    page = (ROOT / "docs/failures.md").read_text()
    assert page == failures_page(), "regenerate with: python -m bvpkit.status > docs/failures.md"
    assert failures_table() in page
