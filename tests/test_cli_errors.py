"""Every input error on the command line is one line on stderr and exit code 2,
with no traceback and no output file (docs: cli-contract.md, "Exit codes").

The metric-file cases themselves are in tests/metric/test_hostile_inputs.py;
this file covers the other ways input can be bad: files that cannot be read,
options, events that cannot be audited, output paths, and hostile text in
file names.
"""

from __future__ import annotations

import json

import pytest

from auditor import cli
from auditor.metric.loader import MAX_FILE_BYTES

FLAT = ('name = "Flat"\ncoordinates = ["t", "x", "y", "z"]\n[parameters]\na = 1.0\n'
        '[metric]\nline_element = "-a*dt**2 + dx**2 + dy**2 + dz**2"\n'
        "[region]\nt = 0.0\nx = [-1.0, 1.0]\ny = 0.0\nz = 0.0\npoints = 3\n")
#: g_tt = -x**2 vanishes at x = 0: a degenerate event.
DEGENERATE = ('name = "Degenerate at x = 0"\ncoordinates = ["t", "x", "y", "z"]\n[metric]\n'
              'line_element = "-x**2*dt**2 + dx**2 + dy**2 + dz**2"\n')
AT = "t=0,x=1,y=0,z=0"


def run(argv, capsys):
    try:
        code = cli.main(argv)
    except SystemExit as stop:   # argparse leaves through SystemExit
        code = stop.code
    out, err = capsys.readouterr()
    return code, out, err


def assert_one_line_error(code, out, err, fragment=""):
    assert code == 2, err
    assert err.startswith("auditor: error: "), err
    assert err.count("\n") == 1 and err.endswith("\n"), repr(err)
    assert "Traceback" not in err
    assert fragment in err, err
    return err


@pytest.fixture
def flat(tmp_path):
    path = tmp_path / "flat.toml"
    path.write_text(FLAT)
    return path


def test_a_good_probe_exits_0_and_writes_json(flat, tmp_path, capsys):
    """The contrast case: the same command with good input succeeds."""
    out_path = tmp_path / "out.json"
    code, out, err = run(["probe", str(flat), "--at", AT, "--json", str(out_path)], capsys)
    assert code == 0, err
    assert json.loads(out_path.read_text())["g"][0][0] == pytest.approx(-1.0, abs=0)


@pytest.mark.parametrize("argv, fragment", [
    ([], "the following arguments are required: COMMAND"),
    (["frobnicate"], "invalid choice: 'frobnicate'"),
    (["probe"], "the following arguments are required: file, --at"),
    (["probe", "{flat}"], "the following arguments are required: --at"),
    (["probe", "{flat}", "--at", AT, "--points", "many"], "invalid int value: 'many'"),
    (["probe", "{flat}", "--at", AT, "--bogus"], "unrecognized arguments: --bogus"),
    (["probe", "{flat}", "--at", AT, "--points", "1"], "--points must be at least 2, got 1"),
    (["probe", "{flat}", "--at", AT, "--points", "-5"], "--points must be at least 2, got -5"),
    (["probe", "{flat}", "--at", AT, "--set", "b=2"],
     "--set b: no parameter named 'b' in {flat}; parameters: a"),
    (["probe", "{flat}", "--at", AT, "--set", "a=2^2"],
     "--set a: '^' is not a power here at column 2 of '2^2' (use '**' for powers)"),
    (["probe", "{flat}", "--at", "t=0;x=1,y=0,z=0"],
     "--at t: syntax error (invalid syntax) at column 2 of '0;x=1'"),
    (["probe", "{flat}", "--at", "t=0,x=1,y=0,z=0,t=1"], "--at: coordinate 't' given twice"),
    (["probe", "{flat}", "--at", "t=0,x=1,y=0,z=a**999"],
     "--at z: exponent 999 is too large (at most 256 in size) at column 4 of 'a**999'"),
])
def test_usage_errors(argv, fragment, flat, tmp_path, capsys):
    argv = [a.replace("{flat}", str(flat)) for a in argv]
    code, out, err = run(argv, capsys)
    assert_one_line_error(code, out, err, fragment.replace("{flat}", str(flat)))
    assert out == ""


@pytest.mark.parametrize("command", ["probe", "check"])
def test_unreadable_files(command, tmp_path, capsys):
    extra = ["--at", AT] if command == "probe" else ["--quiet"]
    cases = [
        (tmp_path / "missing.toml", "cannot read file (No such file or directory)"),
        (tmp_path, "is a directory, not a metric file"),
    ]
    big = tmp_path / "big.toml"
    big.write_text(FLAT + "# padding\n" * (MAX_FILE_BYTES // 10 + 1))
    cases.append((big, f"more than the {MAX_FILE_BYTES} accepted"))
    for path, fragment in cases:
        code, out, err = run([command, str(path), *extra], capsys)
        assert_one_line_error(code, out, err, f"{path}: ")
        assert fragment in err


@pytest.mark.parametrize("command", ["probe", "check"])
def test_bad_metric_file_on_every_command(command, tmp_path, capsys):
    path = tmp_path / "bad.toml"
    path.write_text(FLAT.replace("-a*dt**2", "-a*dt**2 + __import__('os').getcwd()*dx**2"))
    out_path = tmp_path / "out.json"
    extra = ["--at", AT] if command == "probe" else ["--quiet"]
    code, out, err = run([command, str(path), *extra, "--json", str(out_path)], capsys)
    assert_one_line_error(code, out, err, f"{path}: [metric.line_element] attribute access "
                                          "cannot be called at column 12")
    assert not out_path.exists()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["bad.toml"]


@pytest.mark.parametrize("command", ["probe", "check"])
def test_set_and_points_are_taken_by_every_command(command, flat, capsys):
    extra = ["--at", AT] if command == "probe" else ["--quiet"]
    code, out, err = run([command, str(flat), *extra, "--set", "sigma=2"], capsys)
    assert_one_line_error(code, out, err, "--set sigma: no parameter named 'sigma'")
    code, out, err = run([command, str(flat), *extra, "--points", "0"], capsys)
    assert_one_line_error(code, out, err, "--points must be at least 2, got 0")


def test_an_event_that_cannot_be_audited(tmp_path, capsys):
    path = tmp_path / "degenerate.toml"
    path.write_text(DEGENERATE)
    out_path = tmp_path / "out.json"
    code, out, err = run(["probe", str(path), "--at", "t=0,x=0,y=0,z=0",
                          "--json", str(out_path)], capsys)
    assert_one_line_error(code, out, err, "event (t=0, x=0, y=0, z=0) cannot be audited: "
                                          "the metric is degenerate there (det g = 0)")
    assert not out_path.exists()


def test_output_folder_that_does_not_exist(flat, tmp_path, capsys):
    target = tmp_path / "no" / "such" / "out.json"
    code, out, err = run(["probe", str(flat), "--at", AT, "--json", str(target)], capsys)
    assert_one_line_error(code, out, err, f"cannot write {target}: folder ")
    assert not target.parent.exists()


def test_json_to_stdout_stays_empty_on_error(flat, capsys):
    code, out, err = run(["probe", str(flat), "--at", "t=0,x=1,y=0", "--json", "-"], capsys)
    assert_one_line_error(code, out, err, "--at: give every coordinate; missing z")
    assert out == ""


def test_line_breaks_in_file_names_and_values_cannot_forge_lines(flat, tmp_path, capsys):
    """A file name or value holding a line break still gives one line (no forged
    second 'auditor:' line in logs)."""
    forged = tmp_path / "x\nauditor: all conditions hold\n.toml"
    code, out, err = run(["probe", str(forged), "--at", AT], capsys)
    assert_one_line_error(code, out, err, "cannot read file")
    bad = tmp_path / "bad.toml"
    bad.write_text(FLAT.replace('"-a*dt**2', '"""-a*dt**2\n+ q\n'
                                ).replace('dz**2"\n', 'dz**2"""\n'))
    code, out, err = run(["probe", str(bad), "--at", AT], capsys)
    assert_one_line_error(code, out, err, "unknown name 'q'")
    code, out, err = run(["probe", str(flat), "--at", "t=0,x=1,y=0,z=oops\nauditor: fine"],
                         capsys)
    assert_one_line_error(code, out, err, "--at z: ")
