"""Attacks on the disk cache and on what travels in it.

A cache folder can be shared (group drives, cluster scratch, container images, CI caches).
Entries are signed with a key kept in the folder, so an entry edited or written without it is
skipped; a writer who holds the key is the harder case, and most tests below play it (they
sign what they plant) to reach the checks behind the signature. What is checked here:
planted entries never run code (nothing stored is executed: programs are plain data, printed
afresh and checked before compiling), the source check refuses every escape we know of,
hostile program trees are refused by name, and cache files or folders that are not the
user's own (other owner, writable by others, links, FIFOs, oversized) are skipped with one
note while the answer stays right.
"""

import hashlib
import json
import math
import os
import re
import subprocess
import sys
from pathlib import Path

import pytest

import bvpkit
import bvpkit.reduce.prepared
from bvpkit.errors import ProgramError
from bvpkit.io import kept
from bvpkit.io.specfile import read_spec
from bvpkit.programs import compiled, program

ROOT = Path(__file__).resolve().parents[1]
SPEC = ROOT / "specs" / "pin_fin.toml"
# analytic: theta(L) = theta_b / cosh(m L), m**2 = 4 h / (k D), with the spec's h = 40, k = 200,
# D = 0.005, L = 0.08, theta_b = 45 (an insulated-tip fin)
TIP = 45.0 / math.cosh(math.sqrt(4 * 40.0 / (200.0 * 0.005)) * 0.08)
needs_root = pytest.mark.skipif(not hasattr(os, "geteuid") or os.geteuid() != 0,
                                reason="giving a file to another user needs root")
OTHER_UID = 54321  # a user id nobody here has


def _limits():  # in the child: bounded memory, so a reader that follows /dev/zero fails fast
    import resource

    resource.setrlimit(resource.RLIMIT_AS, (3 * 2**30, 3 * 2**30))
    os.umask(0)  # the modes bvpkit asks for must not depend on a friendly umask


def _solve(folder, *extra, cwd=None):
    """``bvpkit solve`` of the pin fin in a fresh process with the cache in ``folder``."""
    env = {**os.environ, compiled.CACHE_VARIABLE: str(folder)}
    return subprocess.run([sys.executable, "-m", "bvpkit", "solve", str(SPEC), *extra], capture_output=True,
                          text=True, env=env, cwd=cwd or folder.parent, timeout=120, preexec_fn=_limits)


def _tip(done):
    assert done.returncode == 0, done.stderr
    value = float(re.search(r"tip_excess_temperature_K = (\S+)", done.stdout).group(1))
    assert value == pytest.approx(TIP, rel=1e-9)
    return value


def _notes(done):
    return [line for line in done.stderr.splitlines() if line.startswith("bvpkit: note:")]


def _paths(folder, monkeypatch):
    """The cache files a solve of the pin fin reads, named as bvpkit names them (an attacker
    can compute the names: the key is the spec's content, the stamp the installed code)."""
    monkeypatch.setenv(compiled.CACHE_VARIABLE, str(folder))
    from bvpkit.reduce.form import standard_form

    system = folder / f"system-{standard_form(bvpkit.load(SPEC)).key()}-{compiled.code_stamp()}.json"
    return system, kept._file(kept.spec_key(read_spec(SPEC), {}))


@pytest.fixture(scope="module")
def clean(tmp_path_factory):
    """The files a clean solve of the pin fin leaves in its cache folder (made once)."""
    folder = tmp_path_factory.mktemp("clean") / "cache"
    _tip(_solve(folder, cwd=folder.parent))
    return {p.name: p.read_bytes() for p in folder.iterdir()}


@pytest.fixture()
def warm(clean, tmp_path, monkeypatch):
    """A private cache folder holding the clean files, and the paths of the two entries."""
    folder = tmp_path / "cache"
    folder.mkdir(mode=0o700)
    for name, data in clean.items():
        (folder / name).write_bytes(data)
        os.chmod(folder / name, 0o600)
    system, problem = _paths(folder, monkeypatch)
    assert system.exists() and problem.exists()
    return folder, system, problem


def _octal(text):
    return "".join(f"\\{ord(c):03o}" for c in text)


# -- planted entries ------------------------------------------------------------------------

def test_a_planted_entry_in_the_old_source_format_never_runs(tmp_path, monkeypatch):
    """The probe of the report: code passing the old word filter (NumPy's own file writer, the
    path spelt in octal escapes) with its checksum recomputed, planted for a real spec."""
    marker = tmp_path / "marker"
    payload = f"numpy.savetxt('{_octal(str(marker))}', numpy.zeros(1))\n"
    folder = tmp_path / "cache"
    folder.mkdir(mode=0o700)
    monkeypatch.setenv(compiled.CACHE_VARIABLE, "off")
    plain = bvpkit.load(SPEC)
    bvpkit.solve(plain)
    from bvpkit.reduce.form import standard_form

    body = {"key": None, "prepared": json.loads(json.dumps(bvpkit.prepare(plain).plain()))}
    system, problem = _paths(folder, monkeypatch)
    key = standard_form(plain).key()
    system.write_text(json.dumps({"key": key, "source": payload, "pattern": [[False, True], [True, False]],
                                  "sides": [0, 1], "sha256": hashlib.sha256(payload.encode()).hexdigest()}))
    body["key"] = kept.spec_key(read_spec(SPEC), {})
    inner = body["prepared"]
    inner["system"] = {**inner["system"], "source": payload}
    del inner["system"]["programs"]
    for q in inner["quantities"].values():
        q["source"] = payload
        del q["program"]
    for r in inner["recipes"].values():
        r["source"] = payload
        del r["program"]
    # the checksum as the old reader computed it
    old_checksum = hashlib.sha256(json.dumps(body, sort_keys=True).encode()).hexdigest()
    problem.write_text(json.dumps({"body": body, "sha256": old_checksum}))
    done = _solve(folder)
    assert not marker.exists()
    _tip(done)  # prepared afresh, and right
    notes = _notes(done)
    assert len(notes) == 2 and all("skipped: damaged or in an older format" in line for line in notes), notes


HOSTILE_TREES = {  # "_x" is an argument of all three kinds of program
    "a call of a name outside the grammar": ["__import__", "os"],
    "a dunder name as a symbol": "__builtins__",
    "a string spelt in octal escapes": "\\137\\137import\\137\\137",
    "a string where a number belongs": ["add", "_x", "1e3"],
    "a number that is not finite": ["mul", "_x", float("nan")],
    "an operation nested too deep": json.loads("[" * 400 + '"_x"' + "]" * 400),
}


def _refusal(tree):
    """What bvpkit says of a program holding ``tree`` (as the printer finds it)."""
    try:
        program.validate({"name": "quantity", "args": [["x", ["_x"]]], "shape": [1], "mesh": "x",
                          "temps": [], "entries": [[[0], tree]]})
    except ProgramError as err:
        return str(err).split(": ", 1)[1]
    raise AssertionError("not refused")


@pytest.mark.parametrize(("where", "what"), [
    ("system", "a call of a name outside the grammar"),
    ("quantity", "a string spelt in octal escapes"),
    ("recipe", "a number that is not finite"),
    ("quantity", "an operation nested too deep"),
    ("system", "a dunder name as a symbol"),
    ("recipe", "a string where a number belongs"),
])  # every hostile node is refused in-process below; these take each kind of program through the CLI
def test_a_planted_program_with_hostile_nodes_is_refused_and_the_answer_stays_right(warm, what, where):
    folder, system, problem = warm
    path = system if where == "system" else problem
    data = json.loads(path.read_text())
    body = data["body"]
    if where == "system":
        target = next(q for q in body["programs"] if q["name"] == "rhs")
    elif where == "quantity":
        target = next(iter(body["prepared"]["quantities"].values()))["program"]
    else:
        target = next(r for r in body["prepared"]["recipes"].values() if r["program"])["program"]
    target["entries"][0][1] = HOSTILE_TREES[what]
    data["signature"] = compiled.signature(body)  # a writer who holds the key signs it
    path.write_text(json.dumps(data))
    if where == "system":
        problem.unlink()  # so that the system entry is the one read
    done = _solve(folder)
    _tip(done)
    notes = _notes(done)
    assert len(notes) == 1, notes
    assert notes[0].startswith(f"bvpkit: note: cache entry {path.name} skipped: program '")
    assert notes[0].endswith(_refusal(HOSTILE_TREES[what]))


def _plain_checksum(body):
    """What a writer without the key can compute: the checksum entries once carried."""
    return hashlib.sha256(json.dumps(body, sort_keys=True, separators=(",", ":")).encode()).hexdigest()


@pytest.mark.parametrize("where", ["problem", "system"])
def test_an_edited_number_is_skipped_with_one_note_and_the_answer_stays_right(warm, where):
    """A number changed in an entry by a writer without the cache's key (the checksum it can
    compute recomputed): the entry is not used."""
    folder, system, problem = warm
    path = problem if where == "problem" else system
    data = json.loads(path.read_text())
    if where == "problem":
        data["body"]["prepared"]["constants"]["h"] = 80.0  # the spec says 40
    else:
        rhs = next(q for q in data["body"]["programs"] if q["name"] == "rhs")
        text = json.dumps(rhs)
        number = re.search(r"(?<![\w.])(\d+\.\d+|\d+)(?![\w.])", json.dumps(rhs["entries"] + rhs["temps"])).group(1)
        edited = json.loads(text.replace(number, repr(float(number) * 2), 1))
        assert edited != rhs
        data["body"]["programs"] = [edited if q["name"] == "rhs" else q for q in data["body"]["programs"]]
        problem.unlink()  # so that the system entry is the one read
    data["sha256"] = _plain_checksum(data["body"])
    path.write_text(json.dumps(data))
    done = _solve(folder)
    _tip(done)  # analytic, as above: the spec's own numbers
    assert _notes(done) == [f"bvpkit: note: cache entry {path.name} skipped: it is not signed with this "
                            "cache's key (edited, or made elsewhere)"]


def _sign(path, data):
    data["signature"] = compiled.signature(data["body"])  # a writer who holds the key
    path.write_text(json.dumps(data))


@pytest.mark.parametrize(("edit", "why"), [
    (lambda body: body["prepared"]["constants"].update(h=80.0), "differs from the spec"),
    (lambda body: body["prepared"]["facts"]["settings"]["save"].update(report_json="planted.json"),
     "differs from the spec"),
    (lambda body: body["prepared"]["facts"]["settings"].update(tol=0.5), "differs from the spec"),
    (lambda body: body.update(spec=body["spec"].replace("40", "80")), "made for another spec"),
    (lambda body: body.update(set=[["h", 80.0]]), "made for another spec"),
])
def test_a_signed_entry_is_used_only_for_the_spec_it_was_made_for(warm, edit, why):
    """Even signed, an entry whose spec, values or settings are not the spec's is skipped; and
    no file is written that the spec does not name."""
    folder, _, problem = warm
    data = json.loads(problem.read_text())
    edit(data["body"])
    _sign(problem, data)
    done = _solve(folder)
    _tip(done)
    notes = _notes(done)
    assert len(notes) == 1 and notes[0].startswith(f"bvpkit: note: cache entry {problem.name} skipped:"), notes
    assert why in notes[0]
    assert not (folder.parent / "planted.json").exists()


def test_an_entry_made_for_another_spec_is_not_used_under_this_ones_name(warm, tmp_path):
    folder, _, problem = warm
    other = tmp_path / "other"
    other.mkdir()
    shelf = ROOT / "specs" / "cantilever_shelf.toml"
    env = {**os.environ, compiled.CACHE_VARIABLE: str(folder)}
    done = subprocess.run([sys.executable, "-m", "bvpkit", "solve", str(shelf)], capture_output=True, text=True,
                          env=env, cwd=other, timeout=120)
    assert done.returncode == 0, done.stderr
    made = next(p for p in folder.glob("problem-*.json") if p != problem)
    data = json.loads(made.read_text())
    data["body"]["key"] = json.loads(problem.read_text())["body"]["key"]
    _sign(problem, data)
    done = _solve(folder)
    _tip(done)
    assert len(_notes(done)) == 1 and "made for another spec" in _notes(done)[0]


def test_an_entry_too_large_to_build_is_skipped_before_anything_is_built(warm):
    folder, _, problem = warm
    data = json.loads(problem.read_text())
    quantity = data["body"]["prepared"]["quantities"]["theta(L)"]["program"]
    quantity["entries"][0][1] = ["add", *(["mul", 1.5, "_x"] for _ in range(program.MAX_STORED_NODES // 3 + 1))]
    _sign(problem, data)
    done = _solve(folder)
    _tip(done)
    assert _notes(done) == [f"bvpkit: note: cache entry {problem.name} skipped: it holds more than "
                            f"{program.MAX_STORED_NODES} terms (a larger system is generated afresh)"]


def _leaves(item, at=()):
    if isinstance(item, dict):
        for k, v in item.items():
            yield from _leaves(v, (*at, k))
    elif isinstance(item, list):
        for i, v in enumerate(item):
            yield from _leaves(v, (*at, i))
    else:
        yield at


_ODD = [0, 1, -1, 2, 3, 1000, 2**63, 0.5, -0.0, 1e308, True, False, None, "", "x", "_length", "given", [], {}, [0]]


def test_single_value_changes_of_a_signed_entrys_layout_never_give_an_internal_error(warm, monkeypatch, capsys):
    """Each changed value of the layout (signed, so only the entry's own checks stand between
    it and the solve): the answer is right, or the entry is skipped with one note."""
    import random

    from bvpkit.io.cli import main

    folder, _, problem = warm
    monkeypatch.chdir(folder.parent)
    clean = json.loads(problem.read_text())
    spots = [("layout", *at) for at in _leaves(clean["body"]["prepared"]["layout"])]
    spots += [("system", "sides", i) for i in range(len(clean["body"]["prepared"]["system"]["sides"]))]
    rng = random.Random(22)  # the same draws every run
    for _ in range(40):
        at, value = rng.choice(spots), rng.choice(_ODD)
        data = json.loads(json.dumps(clean))
        node = data["body"]["prepared"]
        for step in at[:-1]:
            node = node[step]
        node[at[-1]] = value
        _sign(problem, data)
        compiled._MEMORY.clear()
        bvpkit.reduce.prepared._PROBLEMS.clear()
        compiled._NOTED.clear()
        code = main(["solve", str(SPEC)])
        out, err = capsys.readouterr()
        assert code == 0, (at, value, err)
        assert float(re.search(r"tip_excess_temperature_K = (\S+)", out).group(1)) == pytest.approx(TIP, rel=1e-9)
        assert len(_notes(subprocess.CompletedProcess([], 0, out, err))) <= 1, (at, value, err)


@needs_root
def test_an_entry_of_another_user_is_not_used_even_when_well_formed(warm):
    folder, _, problem = warm
    data = json.loads(problem.read_text())
    quantity = data["body"]["prepared"]["quantities"]["theta(L)"]["program"]
    quantity["entries"][0][1] = ["mul", 2, quantity["entries"][0][1]]  # a wrong answer in the grammar
    data["signature"] = compiled.signature(data["body"])
    problem.write_text(json.dumps(data))
    # control: the user's own entry is trusted, so the doubled value shows
    value = float(re.search(r"tip_excess_temperature_K = (\S+)", _solve(folder).stdout).group(1))
    assert value == pytest.approx(2 * TIP, rel=1e-9)
    os.chown(problem, OTHER_UID, -1)  # the same file, given to someone else
    done = _solve(folder)
    _tip(done)
    assert _notes(done) == [f"bvpkit: note: cache entry {problem.name} skipped: it belongs to another user "
                            f"(uid {OTHER_UID})"]


def test_a_fifo_and_a_link_to_dev_zero_are_skipped_promptly(tmp_path, monkeypatch):
    folder = tmp_path / "cache"
    folder.mkdir(mode=0o700)
    system, problem = _paths(folder, monkeypatch)
    os.mkfifo(problem)  # an open without O_NONBLOCK would wait for a writer forever
    os.symlink("/dev/zero", system)  # a reader that follows it reads forever
    done = _solve(folder)  # bounded: subprocess timeout and a memory limit
    _tip(done)
    notes = _notes(done)
    assert any(problem.name in n and "not a regular file" in n for n in notes), notes
    assert any(system.name in n and "symbolic link" in n for n in notes), notes


def test_an_oversized_entry_is_skipped_unparsed(warm, monkeypatch):
    folder, _, problem = warm
    with open(problem, "a") as handle:
        handle.write(" " * (compiled.CACHE_FILE_LIMIT + 1))  # still valid JSON, but too large
    done = _solve(folder)
    _tip(done)
    limit = compiled.CACHE_FILE_LIMIT
    assert _notes(done) == [f"bvpkit: note: cache entry {problem.name} skipped: it is larger than {limit} "
                            "bytes"]


def test_a_folder_writable_by_others_is_neither_read_nor_written_and_said_once(warm):
    folder, system, problem = warm
    os.chmod(folder, 0o777)
    before = {p.name: p.stat().st_mtime_ns for p in folder.iterdir()}
    done = _solve(folder)
    _tip(done)
    assert _notes(done) == [f"bvpkit: note: cache folder {folder} not used: it is writable by group or "
                            "others (mode 777; chmod go-w to use it)"]
    assert {p.name: p.stat().st_mtime_ns for p in folder.iterdir()} == before


@needs_root
def test_a_folder_of_another_user_is_not_used(warm):
    folder, _, _ = warm
    os.chown(folder, OTHER_UID, -1)
    done = _solve(folder)
    _tip(done)
    assert _notes(done) == [f"bvpkit: note: cache folder {folder} not used: it belongs to another user "
                            f"(uid {OTHER_UID})"]


def test_the_cache_folder_is_made_private_and_its_files_too_and_then_used_quietly(tmp_path):
    folder = tmp_path / "new" / "cache"
    first = _solve(folder, cwd=tmp_path)  # umask 0 in the child
    _tip(first)
    assert folder.stat().st_mode & 0o777 == 0o700
    files = list(folder.iterdir())
    assert files and all(f.stat().st_mode & 0o777 == 0o600 for f in files)
    second = _solve(folder, cwd=tmp_path)
    assert _tip(second) == _tip(first) and _notes(second) == []


def test_a_sweep_workers_preparation_with_a_hostile_program_is_refused(tmp_path, monkeypatch):
    monkeypatch.setenv(compiled.CACHE_VARIABLE, "off")
    problem = bvpkit.load(SPEC)
    bvpkit.solve(problem)
    body = json.loads(json.dumps(bvpkit.prepare(problem).plain()))
    compiled._MEMORY.clear()
    body["system"]["programs"][0]["entries"][0][1] = ["getattr", "_y0", "_y1"]
    with pytest.raises(ProgramError, match="unknown operation 'getattr'"):
        bvpkit.reduce.prepared.Prepared.from_plain(body).compiled


# -- the source check -------------------------------------------------------------------------

def _function(body):
    lines = "".join(f"    {line}\n" for line in body.splitlines())
    return "def rhs(x, y, p, k):\n" + lines + "    return out\n"


ESCAPES = {
    "octal escapes in a string": "out = exp('\\137\\137import\\137\\137')",
    "unicode escapes in a string": "out = exp('\\u005f\\u005fimport\\u005f\\u005f')",
    "bytes": "out = exp(b'os')",
    "a format string": "out = exp(f'{x}')",
    "getattr spelt through attributes": "out = numpy.core.multiarray.__builtins__",
    "an attribute of an allowed name": "out = exp.__self__",
    "an attribute of an argument": "out = y.__class__.__bases__[0].__subclasses__()",
    "the builtins by name": "out = __builtins__",
    "a dunder name": "out = __import__",
    "fullwidth letters that normalise to a dunder": "out = \uff3f\uff3fimport\uff3f\uff3f",
    "a call of a builtin": "out = getattr(y, 'shape')",
    "eval": "out = eval('1')",
    "a subscript of a callable": "out = exp[0]",
    "a subscript by a slice": "out = y[::-1]",
    "a subscript by a name": "out = y[k]",
    "a nested subscript": "out = y[0][0]",
    "a lambda": "out = (lambda: 0)()",
    "a comprehension": "out = [i for i in y]",
    "a generator": "out = sum(i for i in y)",
    "a walrus": "out = (_t0 := 1)",
    "keywords": "out = exp(x, out=y)",
    "an extra positional argument (a ufunc's out)": "out = exp(x, y)",
    "a callable not called": "_t0 = exp",
    "rebinding a callable": "exp = 1",
    "rebinding an argument": "y = 1",
    "augmented assignment": "out += 1",
    "two targets": "out = _t0 = 1",
    "tuple unpacking": "_t0, _t1 = 1, 2",
    "an import": "import os",
    "an import from": "from os import system",
    "a conditional": "if x:\n    out = 1",
    "a loop": "for i in y:\n    out = i",
    "a with block": "with y:\n    out = 1",
    "a try block": "try:\n    out = 1\nexcept Exception:\n    out = 2",
    "global": "global out",
    "del": "del y",
    "an expression statement": "exp(x)",
    "a nested function": "def rhs(x):\n    return x",
    "a conditional expression": "out = 1 if x else 2",
    "a comparison": "out = x < 1",
    "a boolean operator": "out = x or y",
    "a bitwise operator": "out = x ^ y",
    "matrix multiplication": "out = x @ y",
    "floor division": "out = x // 2",
    "a list": "out = [1, 2]",
    "a dict": "out = {}",
    "a set": "out = {1}",
    "True": "out = True",
    "None": "out = None",
    "a complex number": "out = 1j",
    "an infinite float": "out = 1e999",
    "a huge integer": "out = 10 ** 400 + 123456789012345678901234567890",
    "a starred argument": "out = exp(*y)",
    "a tuple of expressions": "out = zeros((x, 1))",
    "ellipsis": "out = ...",
    "await": "out = await x",
    "yield": "out = yield x",
    "assert": "assert x",
    "raise": "raise SystemExit",
    "pass": "pass",
    "a class": "class A:\n    pass",
    "not": "out = not x",
    "unary plus": "out = +x",
}


@pytest.mark.parametrize("name", sorted(ESCAPES))
def test_the_source_check_refuses_every_escape_of_the_corpus(name):
    with pytest.raises(ProgramError, match="generated source refused"):
        program.check_source(_function(ESCAPES[name]))


@pytest.mark.parametrize("source", [
    "import os\n",
    "rhs = 1\n",
    "def rhs(x, y, p, k):\n    return exp\n",
    "def rhs(x, y, p, k):\n    out = 1\n",
    "@exp\ndef rhs(x, y, p, k):\n    return out\n",
    "def rhs(x, y, p, k=__import__('os')):\n    return out\n",
    "def rhs(x, y, p, *k):\n    return out\n",
    "def rhs(x, y, p, k) -> exp:\n    return out\n",
    "def __init__(x):\n    return out\n",
    "def evil(x):\n    return out\n",
    "def rhs(x, y, p, os):\n    return out\n",
    "def rhs(x, y, p, k):\n    return out\n" + "# " + "x" * 10 + "\nexec('1')\n",
    "def rhs(x, y, p, k):\n    out = " + "(" * 300 + "x" + ")" * 300 + "\n    return out\n",
    "\x00",
])
def test_the_source_check_refuses_a_malformed_frame(source):
    with pytest.raises(ProgramError, match="generated source refused"):
        program.check_source(source)


def test_the_source_check_accepts_what_the_printer_writes():
    tree = ["add", ["exp", "_y0"], ["heaviside", "_x", 0.5], ["neg", ["pow", "_k0", -2]]]
    args = [["x", ["_x"]], ["y", ["_y0"]], ["p", []], ["k", ["_k0"]]]
    source = program.render({"name": "rhs", "args": args, "shape": [1], "mesh": "y", "temps": [],
                             "entries": [[[0], tree]]})
    program.check_source(source)  # does not raise
    with pytest.raises(ProgramError, match="the name 'numpy'"):
        program.check_source(source.replace("exp(_y0)", "exp(numpy)"))


# -- hostile program trees ----------------------------------------------------------------------

def _rhs(tree=("add", "_y0", 1), **changes):
    base = {"name": "rhs", "args": [["x", ["_x"]], ["y", ["_y0", "_y1"]], ["p", []], ["k", []]], "shape": [2],
            "mesh": "y", "temps": [["_t0", ["mul", "_y0", "_y1"]]],
            "entries": [[[0], "_y1"], [[1], list(tree) if isinstance(tree, tuple) else tree]]}
    base.update(changes)
    return base


HOSTILE = {
    "unknown operation 'system'": _rhs(["system", "_y0"]),
    "unknown operation 'getattr'": _rhs(["getattr", "_y0", "_y1"]),
    "unknown operation 'arcsin'": _rhs(["arcsin", "_y0"]),  # the printed name is not a program's name
    "'__import__' is not an internal symbol": _rhs("__import__"),
    "'1.5' is not an internal symbol": _rhs(["add", "_y0", "1.5"]),
    "'_y0; import os' is not an internal symbol": _rhs("_y0; import os"),
    "'_y01' is not an internal symbol|used before it is defined": _rhs("_y01"),
    "the number nan is not finite": _rhs(["mul", float("nan"), "_y0"]),
    "the number inf is not finite": _rhs(["mul", float("inf"), "_y0"]),
    "the number -inf is not finite": _rhs(["add", "_y0", float("-inf")]),
    "beyond 2\\*\\*53": _rhs(["mul", 10**400, "_y0"]),
    "a bool": _rhs(["mul", True, "_y0"]),
    "a NoneType": _rhs(["mul", None, "_y0"]),
    "a dict": _rhs(["mul", {"op": "exp"}, "_y0"]),
    "an empty list": _rhs(["mul", [], "_y0"]),
    "'exp' takes 1 operands, got 2": _rhs(["exp", "_y0", "_y1"]),
    "'add' takes two or more operands, got 1": _rhs(["add", "_y0"]),
    "more than 500000 nodes": _rhs(["add", *(["_y0"] * 500_001)]),
    "the symbol _t1 is used before it is defined": _rhs(["add", "_t1", 1]),
    "the symbol _k0 is used before it is defined": _rhs(["add", "_k0", 1]),
    "unknown function name '__init__'": _rhs(name="__init__"),
    "unknown function name 'evil'": _rhs(name="evil"),
    "unknown or repeated argument 'os'": _rhs(args=[["os", []]]),
    "unknown or repeated argument 'y'": _rhs(args=[["y", ["_y0"]], ["y", ["_y0"]]]),
    "must unpack _y1, not '_y2'": _rhs(args=[["x", ["_x"]], ["y", ["_y0", "_y2"]]]),
    "argument 'x' unpacks a wrong list": _rhs(args=[["x", ["_y0"]], ["y", ["_y0", "_y1"]]]),
    "'shape' must be one or two sizes": _rhs(shape=[10**9]),
    "'shape' must be one or two sizes with": _rhs(shape=[2, 2, 2]),
    "'mesh' must be None or the name of an argument": _rhs(mesh="__class__"),
    "temporary 0 must be": _rhs(temps=[["__t0", 1]]),
    "entry index \\[5\\] is outside the shape": _rhs(entries=[[[5], "_y0"]]),
    "entry index \\[0\\] is outside the shape \\[2\\], or repeated":
        _rhs(entries=[[[0], "_y0"], [[0], "_y1"]]),
    "unknown field 'source'": {**_rhs(), "source": "import os"},
    # arithmetic on Python numbers has no cost bounded by size: 3**1000000000 runs for
    # minutes, 2**(2**53) ends in MemoryError, 1.0/0.0 raises
    "'pow' of numbers alone": _rhs(["add", "_y0", ["pow", 3, 1000000000]]),
    "'pow' of numbers alone \\(a program": _rhs(["pow", ["neg", 3], 1000000000]),
    "'div' of numbers alone": _rhs(["add", "_y0", ["div", 1.0, 0.0]]),
    "'exp' of numbers alone": _rhs(["mul", "_y0", ["exp", 1000]]),
    "'mul' of more than one whole number": _rhs(["mul", 2**53, 2**53, 2**53, "_y0"]),
    "'add' of more than one whole number": _rhs(["add", *([2**53] * 40), "_y0"]),
    "temporary 0 is a number alone": _rhs(temps=[["_t0", 3]], entries=[[[0], ["pow", "_t0", 1000000000]]]),
    "a str .* where a program": "def rhs(): pass",
}


def _deep():
    tree = "_y0"
    for _ in range(10_000):  # deeper than Python's recursion limit: refused, not a RecursionError
        tree = ["neg", tree]
    return _rhs(tree)


HOSTILE["nested more than 150 levels deep"] = _deep()


@pytest.mark.parametrize("what", sorted(HOSTILE))
def test_hostile_program_trees_are_refused_by_name(what):
    with pytest.raises(ProgramError, match=what):
        program.build([HOSTILE[what]])


def test_a_program_list_that_is_not_a_systems_functions_is_refused():
    from bvpkit.programs.layout import StateLayout

    layout = StateLayout(key="k", independent="x", functions=(("y", 2),), states=(("y", 0), ("y", 1)), users=2,
                         regions=1, parameters=(), constants=())
    import numpy as np

    with pytest.raises(ProgramError, match="not the functions of a system"):
        compiled.assemble(layout, [_rhs()], np.zeros((2, 2), dtype=bool), np.array([0, 1]))
    with pytest.raises(ProgramError, match="pattern or the condition sides"):
        compiled.assemble(layout, [_rhs()], np.zeros((3, 3), dtype=bool), np.array([0, 1]))
