"""Reliability and security tests: fuzzing, code-generation audit, resource
limits, singular spacetimes, numerical trust and interruptions.

Shared helpers live here so that the test files stay about what they test:
running the command line (in this process, or as a child process with a
timeout), reading JSON strictly (a NaN or Infinity literal is an error, since
the writer must map non-finite numbers to null) and listing where nulls are.

Long runs (at least 10 000 generated cases per property) are marked ``slow``
and skipped unless asked for::

    python -m pytest -m slow tests/reliability            # or
    AUDITOR_LONG_TESTS=1 python -m pytest tests/reliability
"""

from __future__ import annotations

import io
import json
import os
import re
import subprocess
import sys
import tokenize
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[2]
SAMPLES = REPO / "sample_metrics"
DOCS = REPO / "docs"

#: Base seed of the randomised long runs; AUDITOR_TEST_SEED=N replays or explores.
BASE_SEED = int(os.environ.get("AUDITOR_TEST_SEED", "20250601"))


def long_tests_requested(config) -> bool:
    """True when the slow tests were asked for: ``-m slow`` (any mark expression
    naming ``slow`` without negating it) or ``AUDITOR_LONG_TESTS`` set."""
    if os.environ.get("AUDITOR_LONG_TESTS"):
        return True
    expr = (getattr(config.option, "markexpr", "") or "").replace(" ", "")
    return "slow" in expr and "notslow" not in expr


def require_long(request) -> None:
    if not long_tests_requested(request.config):
        pytest.skip("long run: opt in with `-m slow` or AUDITOR_LONG_TESTS=1")


def child_env(cache_dir: Path | str | None = None, **extra) -> dict:
    """Environment for a child ``auditor`` process: this interpreter's package,
    an optional private kernel cache, no debugging tracebacks."""
    env = dict(os.environ)
    env.pop("AUDITOR_DEBUG", None)
    env["PYTHONPATH"] = str(REPO) + os.pathsep + env.get("PYTHONPATH", "")
    if cache_dir is not None:
        env["AUDITOR_CACHE_DIR"] = str(cache_dir)
    env.update({k: str(v) for k, v in extra.items()})
    return env


def auditor_cmd(*args) -> list[str]:
    return [sys.executable, "-m", "auditor", *map(str, args)]


def run_child(args, *, cwd, timeout, env=None) -> subprocess.CompletedProcess:
    """Run ``python -m auditor ARGS``; a child still running after ``timeout``
    seconds is killed and the test fails with what it printed so far."""
    proc = subprocess.Popen(auditor_cmd(*args), cwd=cwd, env=env or child_env(),
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            stdin=subprocess.DEVNULL)
    try:
        out, err = proc.communicate(timeout=timeout)
    except subprocess.TimeoutExpired:
        proc.kill()
        out, err = proc.communicate()
        pytest.fail(f"`auditor {' '.join(map(str, args))}` still running after {timeout} s "
                    f"(killed); stderr so far: {err[-2000:]!r}")
    return subprocess.CompletedProcess(proc.args, proc.returncode, out, err)


def run_inprocess(argv, capsys) -> tuple[int, str, str]:
    """``auditor ARGV`` in this process: (exit code, stdout, stderr)."""
    from auditor import cli
    try:
        code = cli.main([str(a) for a in argv])
    except SystemExit as stop:          # argparse leaves through SystemExit
        code = stop.code
    out, err = capsys.readouterr()
    return code, out, err


def assert_one_line_error(code: int, err: str, fragment: str = "") -> str:
    """Exit 2 with exactly one ``auditor: error:`` line and no traceback."""
    assert code == 2, f"exit {code}, stderr {err!r}"
    assert err.startswith("auditor: error: "), err
    assert err.count("\n") == 1 and err.endswith("\n"), repr(err)
    assert "Traceback" not in err
    assert fragment in err, err
    return err


def _refuse_constant(name):
    raise ValueError(f"non-finite JSON literal {name} (the writer must emit null)")


def load_json_strict(path_or_text) -> object:
    """Parse JSON refusing NaN, Infinity and -Infinity literals."""
    text = Path(path_or_text).read_text() if isinstance(path_or_text, Path) else path_or_text
    return json.loads(text, parse_constant=_refuse_constant)


def null_paths(obj, prefix: str = "") -> list[str]:
    """Dotted paths of every null in a JSON tree (list items as [i])."""
    if obj is None:
        return [prefix]
    out: list[str] = []
    if isinstance(obj, dict):
        for k, v in obj.items():
            out += null_paths(v, f"{prefix}.{k}" if prefix else k)
    elif isinstance(obj, list):
        for i, v in enumerate(obj):
            out += null_paths(v, f"{prefix}[{i}]")
    return out


def part_files(folder: Path) -> list[str]:
    """Temporary files an interrupted write could leave behind."""
    return sorted(p.name for p in Path(folder).iterdir()
                  if p.name.endswith(".part") or p.name.startswith(".auditor-"))


# -- generated source -------------------------------------------------------------
#: Names the generator itself writes (kernels.py); anything else in a kernel's
#: source is a leak.
GENERATOR_WORDS = {"def", "kernel", "x", "p", "out", "with", "numpy", "return"}
#: NumPy names a kernel may use: the functions of the language, the constants
#: pi and e, and errstate for the with-block.
NUMPY_FUNCS = {"sqrt", "exp", "log", "sin", "cos", "tan", "arcsin", "arccos", "arctan",
               "arctan2", "sinh", "cosh", "tanh", "arcsinh", "arccosh", "arctanh", "pi", "e",
               "errstate", "empty", "float64"}
INTERNAL_NAME = re.compile(r"^(_c[0-3]|_p\d+|_t\d+)$")


def audit_source(src: str, user_words=()) -> None:
    """Every name token of a generated kernel is the generator's own, read with
    Python's tokenizer (independently of the tool's own regex check); the only
    string literal is 'ignore'; no name in ``user_words`` appears."""
    names, strings = [], []
    prev = None
    for tok in tokenize.generate_tokens(io.StringIO(src).readline):
        if tok.type == tokenize.NAME:
            if prev is not None and prev.string == ".":
                assert names and names[-1] == "numpy", f"attribute of a non-module in\n{src}"
                assert tok.string in NUMPY_FUNCS, f"numpy.{tok.string} in\n{src}"
            else:
                names.append(tok.string)
        elif tok.type == tokenize.STRING:
            strings.append(tok.string)
        elif tok.type == tokenize.ERRORTOKEN and tok.string.strip():
            raise AssertionError(f"unexpected character {tok.string!r} in\n{src}")
        prev = tok
    assert src.isascii(), "generated source is not ASCII"
    allowed = GENERATOR_WORDS | {"errstate", "all"}
    for n in names:
        assert n in allowed or INTERNAL_NAME.match(n), f"name {n!r} in generated source\n{src}"
    leaked = {w for w in user_words if w not in allowed and not INTERNAL_NAME.match(w)} & set(names)
    assert not leaked, f"user names {leaked} in generated source"
    assert strings == ["'ignore'"], f"string literals {strings} in generated source"
