"""A corpus of bad specs, problems and options driven through the command line: every message
is in the user's words. No internal symbol (``_y0``, ``_x``, ``_k0``, ``zoo``), no pydantic
wording or class name, no "(and N more problems)" hiding the rest, no doubled status word,
no Python error class; and the exit code is bad input (2) or a status, never an internal error.
The corpus is generated from tables of keys and wrong values, and a hypothesis-driven part
puts drawn values at drawn keys."""

from __future__ import annotations

import json
import re
from pathlib import Path

import pytest
from hypothesis import given
from hypothesis import strategies as st

from bvpkit.io import cli

ROOT = Path(__file__).resolve().parents[1]
BASE = {
    "title": '"Our test rod"',
    "problem": {
        "independent": '"r"',
        "domain": '[0, "L"]',
        "equations": '''["y'' = m2*y"]''',
        "conditions": '''["y(0) = 1", "y'(L) = 0"]''',
        "constants": "{ m2 = 4.0, L = 1.0 }",
    },
    "solver": {"tol": "1e-6"},
    "outputs": {"tip": '"y(L)"'},
    "trace": {"parameter": '"m2"', "start": "1.0", "stop": "9.0"},
}

#: What must never reach a user: internal symbols of the standard form and SymPy's infinities,
#: pydantic's wording and our model classes, a count of problems that are not shown, a status
#: word said twice, Python's error classes and tracebacks.
FORBIDDEN = [
    (r"(?<![A-Za-z0-9'])_(?:y|x|k|p|t|s|length|u)\d*\b", "an internal symbol"),
    (r"\bzoo\b|ComplexInfinity|\bnan\b(?! \()|Derivative\(|Subs\(|Symbol\(|Function\(", "a SymPy internal"),
    (r"Model\b|Section\b|GridRange|\bSpec\b|union\[|list\[|dict\[|[Ii]nput should be|valid integer|"
     r"[Ff]ield required|extra_forbidden|_type\b|pydantic", "pydantic wording"),
    (r"and \d+ more", "a count of problems that are not shown"),
    (r"\b([a-z_]{3,})(?:: | \(| )\1\b", "a doubled word"),
    (r"Traceback|File \"|\b(?:Type|Key|Attribute|Index|Runtime|Name|ZeroDivision|Overflow)Error\b",
     "a Python error"),
]


def _spec(changes: dict) -> str:
    """TOML text of BASE with ``{"section.key": value or None (removed)}`` applied."""
    data = {k: dict(v) if isinstance(v, dict) else v for k, v in BASE.items()}
    for path, value in changes.items():
        section, _, key = path.rpartition(".")
        target = data.setdefault(section, {}) if section else data
        if value is None:
            target.pop(key, None)
        else:
            target[key] = value
    top = [f"{k} = {v}" for k, v in data.items() if not isinstance(v, dict)]
    tables = [f"\n[{k}]\n" + "\n".join(f"{kk} = {vv}" for kk, vv in v.items()) for k, v in data.items()
              if isinstance(v, dict)]
    return "\n".join(top) + "\n" + "\n".join(tables) + "\n"


def _run(tmp_path, capsys, monkeypatch, text: str, command: str = "check",  # noqa: ANN001
         *options: str) -> tuple[int, str]:
    spec = tmp_path / "case.toml"
    spec.write_text(text)
    monkeypatch.chdir(tmp_path)
    code = cli.main([command, str(spec), *options])
    out = capsys.readouterr()
    return code, out.out + out.err


def _clean(code: int, said: str, case: str) -> None:
    assert code != 70, f"internal error for {case}: {said}"
    for pattern, what in FORBIDDEN:
        found = re.search(pattern, said)
        assert found is None, f"{what} ({found.group(0)!r}) in the message for {case}:\n{said}"


# -- wrong values at every key: generated from the keys and kinds of wrong value ---------------
WRONG = {
    "number": ['"1e-8"', "true", "[1, 2]", "{ a = 1 }", '"small"'],
    "whole": ["1.5", "1000.0", '"100"', "false"],
    "text": ["1", "true", "[1]", "{ a = 1 }", "2.5"],
    "flag": ['"true"', "1", "0.0"],
    "texts": ['"y = 0"', "[1, 2]", "5", "{ a = 1 }"],
    "table": ["5", '"text"', "[1, 2]", "true"],
    "ends": ['"0"', "[0]", "[true, 1]", "{ a = 1 }", "[0, 1, 2]", '[0, "x/"]', "[1, 0]", "[0, 0]"],
}
KEYS = {
    "title": "text", "problem.independent": "text", "problem.domain": "ends", "problem.equations": "texts",
    "problem.conditions": "texts", "problem.constants": "table", "problem.unknowns": "texts",
    "problem.unknown_parameters": "table", "problem.guess": "table", "problem.eigenvalue": "text",
    "problem.mode": "whole", "problem.regions": "texts", "solver.method": "text", "solver.tol": "number",
    "solver.max_nodes": "whole", "solver.verify": "flag", "solver.truncation": "number",
    "outputs.tip": "text",
    "trace.parameter": "text", "trace.start": "number", "trace.stop": "number", "trace.max_points": "whole",
    "trace.outputs": "texts", "save.solution_csv": "text", "units.r": "text",
    "fit.vary": "table", "fit.data": "text",
}
CASES = [(key, value) for key, kind in KEYS.items() for value in WRONG[kind]]


@pytest.mark.parametrize(("key", "value"), CASES, ids=[f"{k}={v}" for k, v in CASES])
def test_a_wrong_value_at_any_key_is_said_in_our_words(key, value, tmp_path, capsys, monkeypatch):
    code, said = _run(tmp_path, capsys, monkeypatch, _spec({key: value}))
    assert code == 2, said
    assert key.rpartition(".")[2] in said
    _clean(code, said, f"{key} = {value}")


def test_several_wrong_values_are_all_listed_in_full(tmp_path, capsys, monkeypatch):
    text = _spec({"solver.tol": '"1e-8"', "solver.max_nodes": "1000.0", "solver.verify": '"yes"',
                  "solver.metod": '"auto"', "problem.mode": "true"})
    code, said = _run(tmp_path, capsys, monkeypatch, text)
    assert code == 2
    assert "5 problems" in said
    for expected in ("unknown key 'solver.metod' (did you mean 'method'?)",
                     "solver.tol: expected a number, got the text '1e-8' (write it without quotes)",
                     "solver.max_nodes: expected a whole number, got the number 1000.0 (write it without a "
                     "decimal point: 1000)",
                     "solver.verify: expected true or false, got the text 'yes'",
                     "problem.mode: expected a whole number, got true"):
        assert expected in said
    _clean(code, said, "five wrong values")


def test_the_quoted_tolerance_of_the_issue_is_explained(tmp_path, capsys, monkeypatch):
    code, said = _run(tmp_path, capsys, monkeypatch, _spec({"solver.tol": '"1e-8"'}))
    expected = (f"bvpkit: bad_input: {tmp_path / 'case.toml'}: solver.tol: expected a number, got the text "
                "'1e-8' (write it without quotes)")
    assert said.strip() == expected


GRID_CASES = [
    ('{ phi = { from = 1, to = "2", count = 3 } }', "sweep.grid.phi.to: expected a number, got the text '2' "
                                                    "(write it without quotes)"),
    ("{ phi = { from = 1, count = 3 } }", "missing key 'sweep.grid.phi.to' (expected a number)"),
    ("{ phi = 5 }", "sweep.grid.phi: expected a list of numbers or a table such as { from = 0.1, to = 10.0, "
                    "count = 20, spacing = \"geometric\" }, got the number 5"),
    ('{ phi = [1, "a"] }', "sweep.grid.phi (item 2): expected a number, got the text 'a'"),
]


@pytest.mark.parametrize(("grid", "expected"), GRID_CASES)
def test_grid_tables_are_explained_without_class_names(grid, expected, tmp_path, capsys, monkeypatch):
    code, said = _run(tmp_path, capsys, monkeypatch, _spec({}) + f"\n[sweep]\ngrid = {grid}\n")
    assert code == 2 and expected in said, said
    _clean(code, said, grid)


# -- bad problems: each a change of the base spec, checked and solved ---------------------------
PROBLEMS = {
    "typo in a function": ({"problem.equations": '''["y'' = m2*exq(y)"]'''}, "did you mean 'exp'"),
    "unknown name": ({"problem.equations": '''["y'' = m3*y"]'''}, "unknown name 'm3'"),
    "too few conditions": ({"problem.conditions": '''["y(0) = 1"]'''}, "2 needed"),
    "too many conditions": ({"problem.conditions": '''["y(0) = 1", "y'(L) = 0", "y(L) = 2"]'''}, "2 needed"),
    "division by zero": ({"problem.equations": '''["y'' = m2*y/0"]'''}, "division by zero"),
    "point outside": ({"problem.conditions": '''["y(0) = 1", "y'(2*L) = 0"]'''}, "r = 2"),
    "reversed domain": ({"problem.domain": '["L", 0]'}, "a < b"),
    "condition outside": ({"problem.domain": '[1, 2]'}, "the point r = 0, where a condition takes a value"),
    "huge number": ({"problem.constants": "{ m2 = 1e305, L = 1.0 }"}, "1e+300"),
    "bad output": ({"outputs.tip": "\"y''''(L)\""}, "order 2"),
    "output of nothing": ({"outputs.tip": '"z(L)"'}, "'z'"),
    "guess of another function": ({"problem.guess": '{ z = "1" }'}, "not an unknown function"),
    "guess with NaN": ({"problem.guess": '{ y = "1/r" }'}, {"solve": "at r = 0", "check": "reads as"}),
    "trace of a non-constant": ({"trace.parameter": '"m3"'}, {"check": "not a constant", "solve": "solved"}),
    "unit of nothing": ({"units.q": '"m"'}, "not a name of the problem"),
    "eigenvalue that is a constant": ({"problem.eigenvalue": '"m2"'}, "eigenvalue"),
    "mode without eigenvalue": ({"problem.mode": "2"}, "eigenvalue"),
    "nonlinear top derivative": ({"problem.equations": '''["y''**2 = m2*y"]'''}, "y''"),
    "empty equation": ({"problem.equations": '[""]'}, "equation 1"),
    "python inside": ({"problem.equations": '''["y''.__class__ = 0"]'''}, "column"),
    "singular system": ({"problem.conditions": '''["y(0) = 1", "y(0) = 2"]'''}, ""),
    "log of a negative guess": ({"problem.equations": '''["y'' = log(y - 2)"]'''}, ""),
    "constraint of higher index": ({"problem.equations": '''["y'' = m2*y + z", "0 = y - r"]''',
                                    "problem.unknowns": '["y", "z"]'}, "index"),
    "algebraic unknown without its equation": ({"problem.equations": '''["y'' = m2*y + z + w", "0 = z - y",
                                                "0 = z**2 - y**2 - 1"]''', "problem.unknowns": '["y", "z", "w"]'},
                                               "'w' is determined by no algebraic equation"),
    "algebraic condition too many": ({"problem.equations": '''["y'' = m2*z", "0 = z - y"]''',
                                      "problem.unknowns": '["y", "z"]',
                                      "problem.conditions": '''["y(0) = 1", "y'(L) = 0", "z(L) = 2"]'''},
                                     "over-determines"),
    "algebraic unknown not listed": ({"problem.equations": '''["y'' = m2*z", "0 = z - y"]'''},
                                     "list it among the unknown functions"),
}


@pytest.mark.parametrize("command", ["check", "solve"])
@pytest.mark.parametrize("case", list(PROBLEMS))
def test_bad_problems_are_explained_in_the_users_names(case, command, tmp_path, capsys, monkeypatch):
    changes, expected = PROBLEMS[case]
    expected = expected[command] if isinstance(expected, dict) else expected
    code, said = _run(tmp_path, capsys, monkeypatch, _spec(changes), command)
    assert expected in said, said
    _clean(code, said, case)
    code, said = _run(tmp_path, capsys, monkeypatch, _spec(changes), command, "--json")
    _clean(code, json.loads(said)["message"], case + " (json)")


@pytest.mark.parametrize("spec", sorted(p.name for p in (ROOT / "specs").glob("*.toml")))
def test_every_bundled_spec_checks_in_the_users_words(spec, capsys):
    code = cli.main(["check", str(ROOT / "specs" / spec)])
    out = capsys.readouterr()
    assert code == 0, out.err
    _clean(code, out.out + out.err, spec)


# -- bad options -------------------------------------------------------------------------------------
OPTIONS = [
    (["solve", "--set", "m2=abc"], "NAME=NUMBER"),
    (["solve", "--set", "m3=1"], "did you mean 'm2'"),
    (["solve", "--tol", "-1"], "tol"),
    (["solve", "--max-nodes", "3"], "max-nodes"),
    (["solve", "--method", "guessing"], "invalid choice"),
    (["solve", "--csv", "no/such/folder/x.csv"], "does not exist"),
    (["trace", "--parameter", "m3"], "not a constant"),
    (["trace", "--parameter", "m2", "--start", "2", "--stop", "2"], ""),
    (["trace", "--plot", "x.xyz"], "not a picture format"),
    (["sweep", "--grid", "m2=1:2"], "--grid"),
    (["sweep", "--grid", "m2=1:9:0"], "count"),
    (["sweep", "--grid", "m9=1,2"], "not a constant"),
    (["sweep", "--grid", "m2=1,2", "--grid", "m2=3,4"], "twice"),
]


@pytest.mark.parametrize(("options", "expected"), OPTIONS, ids=[" ".join(o) for o, _ in OPTIONS])
def test_bad_options_are_explained(options, expected, tmp_path, capsys, monkeypatch):
    command, *rest = options
    try:
        code, said = _run(tmp_path, capsys, monkeypatch, _spec({}), command, *rest, "--quiet"
                          if command != "solve" else "--no-verify")
    except SystemExit as stop:  # argparse's usage errors
        code, said = stop.code, capsys.readouterr().err
    assert expected in said, said
    _clean(code, said, " ".join(options))


FIT_OPTIONS = [
    ([], "fit needs the constants to vary"),
    (["--vary", "m9=1"], "not a constant"),
    (["--vary", "m2=abc"], "NAME=NUMBER"),
    (["--vary", "m2=3"], "fit needs measurements"),
    (["--vary", "m2=3", "--data", "no_such.csv"], "no such file"),
    (["--vary", "m2=3", "--data", "readings.csv", "--sigma", "0"], "finite and positive"),
    (["--vary", "m2=3", "--data", "readings.csv", "--sigma", "nan"], "finite and positive"),
    (["--vary", "m2=3,L=1", "--data", "short.csv"], "cannot determine 2 constants"),
    (["--vary", "m2=3", "--data", "outside.csv"], "outside the domain"),
    (["--vary", "m2=3", "--data", "constant.csv"], "names no unknown"),
]


@pytest.mark.parametrize(("options", "expected"), FIT_OPTIONS, ids=[" ".join(o) or "none" for o, _ in FIT_OPTIONS])
def test_bad_fits_are_explained(options, expected, tmp_path, capsys, monkeypatch):
    (tmp_path / "readings.csv").write_text("r,y\n0.25,0.6\n0.5,0.45\n")
    (tmp_path / "short.csv").write_text("r,y\n0.25,0.6\n")
    (tmp_path / "outside.csv").write_text("r,y\n0.25,0.6\n1.5,0.45\n")
    (tmp_path / "constant.csv").write_text("r,2*m2\n0.25,0.6\n")
    code, said = _run(tmp_path, capsys, monkeypatch, _spec({}), "fit", *options)
    assert code == 2 and expected in said, said
    _clean(code, said, "fit " + " ".join(options))


# -- hypothesis: drawn values at drawn keys --------------------------------------------------------
toml_values = st.one_of(
    st.booleans().map(lambda b: "true" if b else "false"),
    st.integers(-10**6, 10**6).map(str),
    st.floats(allow_nan=False, allow_infinity=False, width=32).map(repr),
    st.text(alphabet="abcxyz019 .-+*/()'=_", max_size=12).map(json.dumps),
    st.lists(st.integers(-5, 5), max_size=3).map(lambda v: "[" + ", ".join(map(str, v)) + "]"),
    st.just("{ a = 1 }"),
)


@given(st.dictionaries(st.sampled_from(sorted(KEYS) + ["solver.metod", "problem.domian", "sweep.grid"]),
                       toml_values, min_size=1, max_size=4))
def test_drawn_wrong_values_never_leak_internals(tmp_path_factory, changes):
    import contextlib
    import io

    folder = tmp_path_factory.mktemp("drawn")
    spec = folder / "drawn.toml"
    spec.write_text(_spec(changes))
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = cli.main(["check", str(spec)])
    _clean(code, out.getvalue() + err.getvalue(), repr(changes))


@pytest.mark.parametrize("command", ["trace", "sweep"])
def test_a_trace_or_sweep_without_settings_says_what_it_can_vary(command, tmp_path, capsys, monkeypatch):
    text = _spec({"trace": None})
    code, said = _run(tmp_path, capsys, monkeypatch, text, command, "--quiet")
    assert code == 2 and "(constants: m2, L)" in said, said
    plain = text.replace("constants = { m2 = 4.0, L = 1.0 }", "").replace("m2*y", "4*y").replace('"L"', "1") \
        .replace("y'(L)", "y'(1)").replace("y(L)", "y(1)")
    code, said = _run(tmp_path, capsys, monkeypatch, plain, command, "--quiet")
    assert code == 2 and "the problem has no constants" in said, said
    _clean(code, said, command)
