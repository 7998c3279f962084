"""The README's examples work as written: its code blocks are read out of README.md and run.

* Python blocks run statement by statement; a statement followed by a comment that shows a
  value (``sol.evaluate("f''(0)")  # 0.33205733621...``) must give that value (digits shown,
  ``...`` marking digits left out). The block of one-line problem classes solves every problem.
* The sweep block runs as a script in a fresh process (workers must start without a main guard).
* The TOML block is loaded and solved; every ``bvpkit ...`` line of the shell blocks is run.
"""

from __future__ import annotations

import ast
import io
import math
import re
import shlex
import shutil
import subprocess
import sys
import tokenize
from pathlib import Path

import pytest

import bvpkit
from bvpkit.io import cli

ROOT = Path(__file__).resolve().parents[1]
README = (ROOT / "README.md").read_text()
BLOCKS = [(m.group(1), m.group(2)) for m in re.finditer(r"```(\w+)\n(.*?)```", README, re.DOTALL)]


def _blocks(language: str, containing: str = "") -> list[str]:
    return [code for lang, code in BLOCKS if lang == language and containing in code]


def _comments(code: str) -> dict[int, str]:
    """Line number -> the text of the comment on that line."""
    found = {}
    for token in tokenize.generate_tokens(io.StringIO(code).readline):
        if token.type == tokenize.COMMENT:
            found[token.start[0]] = token.string.lstrip("#").strip()
    return found


def _shown_value(comment: str):  # noqa: ANN202 - (value, digits after the point) or None
    """The value a comment shows, if it starts with one: a Python literal, or a number whose
    trailing ``...`` says it is cut short."""
    head = re.split(r"\s{2,}|\s\(", comment)[0].strip()
    number = re.fullmatch(r"[-+]?\d+\.(\d+)\.\.\.", head)
    if number:
        return float(head.rstrip(".")), len(number.group(1))
    try:
        return ast.literal_eval(head), None
    except (ValueError, SyntaxError):
        return None


def _run_block(code: str, namespace: dict) -> int:
    """Run a block statement by statement, checking every value a comment shows. Returns the
    number of values checked."""
    tree = ast.parse(code)
    comments = _comments(code)
    checked = 0
    for statement in tree.body:
        if isinstance(statement, ast.Expr):
            expression = compile(ast.Expression(statement.value), "<README>", "eval")
            value = eval(expression, namespace)  # noqa: S307 - the README's own text, run on purpose
            shown = _shown_value(comments.get(statement.end_lineno, ""))
            if shown is None:
                continue
            expected, digits = shown
            if digits is not None:  # cut short: the true value agrees to the digits shown
                assert abs(value - expected) < 1.5 * 10.0 ** -digits * max(1.0, abs(expected)), (
                    f"README shows {expected}... for {ast.unparse(statement)}, bvpkit gives {value!r}")
            else:
                assert value == expected, (
                    f"README shows {expected!r} for {ast.unparse(statement)}, got {value!r}")
            checked += 1
        else:
            exec(compile(ast.Module([statement], []), "<README>", "exec"), namespace)  # noqa: S102
    return checked


def test_the_readme_has_the_blocks_this_test_runs():
    assert len(_blocks("python")) == 7 and len(_blocks("toml")) == 2 and len(_blocks("bash")) >= 3


def test_the_tour_gives_the_values_it_shows():
    (tour,) = _blocks("python", "f''' + f*f''/2 = 0")
    namespace: dict = {}
    # the values shown are the Blasius wall shear 0.332057336 and displacement thickness 1.7207876
    # (Howarth 1938, Proc. R. Soc. A 164, 547; as tabulated in Schlichting, Boundary-Layer Theory)
    assert _run_block(tour, namespace) == 3
    assert "outputs" not in namespace["sol"].summary() or namespace["sol"].success


def test_every_one_line_problem_class_solves():
    (block,) = _blocks("python", "eigenvalue=\"lam\"")
    problems = [eval(compile(ast.Expression(s.value), "<README>", "eval"), {"bvpkit": bvpkit})  # noqa: S307
                for s in ast.parse(block).body]
    assert len(problems) == 11
    for problem in problems:
        solution = bvpkit.solve(problem)
        assert solution.success, f"{problem.equation_text}: {solution.message}"
    # the one line of the periodic orbit: Van der Pol with mu = 1 has period 6.66328686
    # (from memory; checked to 1e-8 in tests/test_user_path.py)
    orbit = bvpkit.solve(problems[3])
    assert orbit.parameters["T"] == pytest.approx(6.663286866, rel=1e-6)
    # analytic: the third eigenvalue of y'' + lam y = 0, y(0) = y(pi) = 0, is 3^2
    assert bvpkit.solve(problems[0]).parameters["lam"] == pytest.approx(9.0, rel=1e-6)
    # McKean 1970 (analytic): the front of u'' + c u' + u (1 - u)(u - a) = 0 moves at c = sqrt(2) (1/2 - a)
    assert bvpkit.solve(problems[7]).parameters["c"] == pytest.approx(2**0.5 * 0.2, rel=1e-6)
    # analytic: T = 1/r outside the sphere, T'(1) = -1
    assert bvpkit.solve(problems[8]).evaluate("T'(1)") == pytest.approx(-1.0, rel=1e-6)


def test_the_complex_block_gives_the_values_it_shows():
    (block,) = _blocks("python", "1j*w/a*T")
    namespace: dict = {}
    # analytic (Carslaw and Jaeger, Conduction of Heat in Solids, 1959, section 2.6): T =
    # exp(-(1 + i) x / d), d = sqrt(2 a / w) = 0.1172824 m: the swing exp(-0.1/d) = 0.4262868
    # and the lag (0.1/d)/w = 3.2578441 h
    assert _run_block(block, namespace) == 2
    assert isinstance(namespace["sol"].evaluate("T(0.1)"), complex)


@pytest.mark.extra
def test_the_sensitivity_and_fit_block_gives_the_values_it_shows(capsys):
    # the derivatives shown are analytic (pin fin, theta(L) = 1/cosh(mL)); the fit's values are
    # those of its readings, made up for the README from cosh(2(1 - x))/cosh(2) plus noise
    (block,) = _blocks("python", "bvpkit.fit(")
    namespace: dict = {}
    assert _run_block(block, namespace) >= 3
    assert namespace["spread"].sampled is not None and "first order" in capsys.readouterr().out


def test_the_trace_block_runs_and_finds_the_fold(tmp_path, monkeypatch):
    pytest.importorskip("matplotlib")
    (block,) = _blocks("python", "bvpkit.trace(")
    monkeypatch.chdir(tmp_path)
    namespace: dict = {}
    # analytic: the fold of y'' + lam e^y = 0 on [0, 1] lies at the maximum over t of
    # t^2 / (2 cosh^2(t/4)) = 3.51383071913
    assert _run_block(block, namespace) == 1
    assert (tmp_path / "branch.png").stat().st_size > 10_000


@pytest.mark.extra
def test_the_fold_curve_block_runs_and_gives_the_ignition_limit(tmp_path, monkeypatch):
    pytest.importorskip("matplotlib")
    (block,) = _blocks("python", "bvpkit.fold_curve(")
    monkeypatch.chdir(tmp_path)
    namespace: dict = {}
    # the value shown: the slab's ignition limit at Bi = 1 (analytic: the solutions are
    # y = y0 + 2 ln sech(a x), so d = 2 a^2 sech^2(a) exp(-2 a tanh(a) / Bi); its maximum over a
    # at Bi = 1 is 0.27067056647322..., found here by scipy's brentq on the derivative)
    assert _run_block(block, namespace) == 1
    from scipy.optimize import brentq

    a = brentq(lambda a: 1 / a - 2 * math.tanh(a) - a / math.cosh(a) ** 2, 0.2, 2.0, xtol=1e-15)
    limit = 2 * a * a / math.cosh(a) ** 2 * math.exp(-2 * a * math.tanh(a))
    assert namespace["curve"].requested[1.0][0].prepared.constants["d"] == pytest.approx(limit, rel=1e-8)
    assert (tmp_path / "map.png").stat().st_size > 10_000


@pytest.mark.extra
def test_the_sweep_block_runs_as_a_plain_script(tmp_path):
    pytest.importorskip("matplotlib")
    (block,) = _blocks("python", "bvpkit.sweep(")
    assert "__main__" not in block
    script = tmp_path / "chart_script.py"
    script.write_text(block + "\nprint(result.message)\n")
    done = subprocess.run([sys.executable, str(script)], cwd=tmp_path, capture_output=True, text=True,
                          timeout=300)
    assert done.returncode == 0, done.stderr
    assert done.stderr == ""
    # once: the workers did not run the script again
    assert done.stdout.count("300 points: 300 solved now, 0 from the store, 0 failed") == 1, done.stdout
    assert (tmp_path / "chart.png").stat().st_size > 10_000 and (tmp_path / "pellet.sqlite").exists()


def test_the_spec_block_loads_and_solves():
    from bvpkit.io.spec import loads

    (block,) = _blocks("toml", "[problem]")
    solution = bvpkit.solve(loads(block, "README"))
    assert solution.success
    # Blasius wall shear f''(0) = 0.332057336 (Howarth 1938, as tabulated by Schlichting)
    assert solution.outputs["wall_shear"] == pytest.approx(0.332057336, rel=1e-7)
    friction = 2 * 0.332057336 / math.sqrt(8.0e4)
    assert solution.outputs["friction_coefficient"] == pytest.approx(friction, rel=1e-7)


def test_the_units_block_labels_the_pin_fin_as_shown():
    from bvpkit.io.spec import loads

    (block,) = _blocks("toml", "[units]")
    fin = (ROOT / "specs" / "pin_fin.toml").read_text().split("[units]")[0]
    solution = bvpkit.solve(loads(fin + block, "README"))
    name, digits, unit = re.search(r"`(heat_rate_W) = ([\d.]+) (W)`", README).groups()
    assert re.search(rf"^  {name} = {re.escape(digits)}\d* {unit}  \(\+/- ", solution.summary(), re.MULTILINE)
    assert "theta' [K/m]" in README


def test_every_command_of_the_shell_blocks_runs(tmp_path, monkeypatch, capsys):
    shutil.copytree(ROOT / "specs", tmp_path / "specs")
    monkeypatch.chdir(tmp_path)
    commands = []
    for block in _blocks("bash"):
        for line in block.splitlines():
            for part in line.split("&&"):
                words = shlex.split(part, comments=True)
                if words and words[0] == "bvpkit":
                    commands.append(words[1:])
    assert len(commands) >= 5
    for words in commands:
        code = cli.main(words)
        out = capsys.readouterr()
        assert code == 0, f"bvpkit {' '.join(words)}: {out.err}"
    assert (tmp_path / "eta.csv").exists() and (tmp_path / "fin.csv").exists()


def test_the_engineering_caution_stays_where_design_figures_appear():
    caution = r"## Engineering caution\n\n.*engineering estimates.*licensed engineering practice"
    assert re.search(caution, README, re.DOTALL)
    after_chart = README.split("docs/design_chart.png)", 1)[1][:400]
    assert "engineering estimates" in after_chart and "(#engineering-caution)" in after_chart
    assert "licensed practice" in (ROOT / "docs" / "verification.md").read_text()
