"""The console: where log records, warnings and C libraries' output go; the funnel's one line for bugs and
interrupts; checked option types."""
import logging
import os
import subprocess
import sys
import textwrap

import pytest
from click.testing import CliRunner

from chimeline.cli import cli
from chimeline.cli.common import ConsoleLog
from tests.helpers import ROOT


def test_console_routes_records_by_verbosity(capsys):
    h = ConsoleLog(verbose=0, quiet=False)

    def emit(name, level, msg):
        h.emit(logging.LogRecord(name, level, __file__, 1, msg, None, None))

    emit("chimeline.workflows.run", logging.INFO, "read: scan.las")
    emit("chimeline.stages.frame", logging.WARNING, "frame: units from the CRS")
    emit("chimeline.workflows.run", logging.WARNING, "profile: only 40 % ok")
    emit("py.warnings", logging.WARNING, "RuntimeWarning: overflow encountered")
    emit("laspy", logging.WARNING, "a library's own warning")
    out, err = capsys.readouterr()
    assert out == "read: scan.las\n" and err == ""  # progress on stdout (stderr is not a terminal), nothing else yet
    h.shown.append("only 40 % ok")  # the command printed this one itself
    h.flush_held()
    out, err = capsys.readouterr()
    assert err == "warning: frame: units from the CRS\n"
    v = ConsoleLog(verbose=1, quiet=False)
    v.emit(logging.LogRecord("py.warnings", logging.WARNING, __file__, 1, "RuntimeWarning: x", None, None))
    assert capsys.readouterr().err == "WARNING [py.warnings] RuntimeWarning: x\n"


@pytest.fixture
def broken_evaluate(monkeypatch, tmp_path):
    from chimeline.workflows import evaluate as wf

    def boom(*a, **k):
        raise RuntimeError("a bug\non two lines")

    monkeypatch.setattr(wf, "evaluate_file", boom)
    return ["evaluate", str(tmp_path / "s.csv"), "--out", str(tmp_path / "o")]


def test_a_bug_is_one_line_with_exit_1_and_the_traceback_with_v(broken_evaluate):
    r = CliRunner().invoke(cli, broken_evaluate)
    assert r.exit_code == 1
    assert r.stderr.splitlines() == ["chimeline: internal error: RuntimeError: a bug on two lines (a bug: please report "
                                     "it; -v shows the traceback)"]
    r = CliRunner().invoke(cli, ["-v", *broken_evaluate])
    assert r.exit_code == 1 and "Traceback" in r.stderr and "RuntimeError: a bug" in r.stderr


def test_an_interrupt_is_one_line(monkeypatch, tmp_path):
    from chimeline.workflows import evaluate as wf

    def stop(*a, **k):
        raise KeyboardInterrupt

    monkeypatch.setattr(wf, "evaluate_file", stop)
    r = CliRunner().invoke(cli, ["evaluate", str(tmp_path / "s.csv"), "--out", str(tmp_path / "o")])
    assert r.exit_code == 130 and r.stderr.strip().splitlines()[-1] == "chimeline: error: interrupted"


@pytest.mark.parametrize("args,phrase", [
    (["synth", "x.yaml", "--out", "o", "--points", "nan"], "Invalid value for '--points': 'nan' is not in [1000, 1e+09]"),
    (["compare", "a", "b", "--out", "o", "--alpha", "0"], "Invalid value for '--alpha'"),
    (["evaluate", "s.csv", "--out", "o", "--decimate", "2.5"], "Invalid value for '--decimate'"),
    (["run", "s.las", "--out", ""], "Invalid value for '--out': the output folder is empty"),
    (["run", "s.las", "--out", "x", "--bogus"], "No such option '--bogus'"),
])
def test_usage_errors_are_one_line(args, phrase, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    r = CliRunner().invoke(cli, args)
    assert r.exit_code == 2 and len(r.stderr.splitlines()) == 1 and phrase in r.stderr
    assert r.stderr.startswith("chimeline: error: ") and "--help" in r.stderr
    assert os.listdir(tmp_path) == []


def test_c_level_output_goes_to_the_log(tmp_path):
    """What C code writes to the descriptors is captured; chimeline's own lines still reach the terminal."""
    code = textwrap.dedent("""
        import logging, os, sys
        from chimeline.cli.common import native_output_to_log, setup_logging
        setup_logging(int(sys.argv[1]), False)
        with native_output_to_log():
            os.write(2, b"[C library] warning on fd 2\\n")
            os.write(1, b"[C library] chatter on fd 1\\n")
            print("python stdout")
            print("python stderr", file=sys.stderr)
        print("after", file=sys.stderr)
    """)
    env = dict(os.environ, PYTHONPATH=os.pathsep.join([str(ROOT / "pipeline"), os.environ.get("PYTHONPATH", "")]))
    quiet = subprocess.run([sys.executable, "-c", code, "0"], capture_output=True, text=True, env=env, check=True)
    assert quiet.stdout == "python stdout\n" and quiet.stderr == "python stderr\nafter\n"
    loud = subprocess.run([sys.executable, "-c", code, "1"], capture_output=True, text=True, env=env, check=True)
    assert "DEBUG library output: [C library] warning on fd 2" in loud.stderr
    assert "DEBUG library output: [C library] chatter on fd 1" in loud.stderr
