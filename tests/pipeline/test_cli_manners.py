"""Command-line manners: quick start, progress on a terminal only, NO_COLOR, -v/-q, --debug, exit codes."""

from __future__ import annotations

import io
import subprocess
import sys
from pathlib import Path
from types import SimpleNamespace

import pytest
from vzero.cli.main import Progress, build_parser, main
from vzero.errors import RecipeError

from tests.pipeline.test_batch import demo_batch


class Terminal(io.StringIO):
    def isatty(self) -> bool:
        return True


def _event(done: int, total: int, plate: str = "p", error: str | None = None, step: str | None = None):
    return SimpleNamespace(done=done, total=total, plate=None if step else plate, error=error, step=step,
                           seconds=1.0)


def test_help_imports_no_heavy_module():
    """`vzero --help` stays quick by importing nothing heavy; its time is measured in bench/ (`python -m bench`),
    not here, where a loaded machine would make a clock flaky."""
    code = ("import sys\nfrom vzero.cli.main import main\n"
            "try:\n    main(['--help'])\nexcept SystemExit:\n    pass\n"
            "heavy = [m for m in ('numpy', 'pandas', 'matplotlib', 'dask', 'distributed', 'openpyxl', 'scipy', 'h5py',"
            " 'jinja2', 'pint') if m in sys.modules]\nprint(heavy, file=sys.stderr)")
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert proc.stderr.strip() == "[]", proc.stderr
    assert "exit codes" in proc.stdout and "run" in proc.stdout


def test_every_command_has_help_with_an_example(capsys):
    parser = build_parser()
    commands = parser._subparsers._group_actions[0].choices  # type: ignore[union-attr]
    for name, sub in commands.items():
        text = sub.format_help()
        assert "exit codes" in text, name
    assert "--jobs" in commands["run"].format_help() and "--scheduler" in commands["run"].format_help()
    assert "example:" in commands["run"].format_help()


def test_progress_bar_on_a_terminal_with_colour_for_failures(monkeypatch):
    monkeypatch.delenv("NO_COLOR", raising=False)
    term = Terminal()
    p = Progress(stream=term)
    p(_event(1, 4))
    p(_event(2, 4, error="bad file"))
    p.finish()
    out = term.getvalue()
    assert "\r" in out and "2/4 plates" in out and "1 failed" in out and "\x1b[31m" in out
    assert out.endswith("\n")


def test_no_color_keeps_the_bar_plain(monkeypatch):
    monkeypatch.setenv("NO_COLOR", "1")
    term = Terminal()
    p = Progress(stream=term)
    p(_event(1, 2, error="bad"))
    assert "1 failed" in term.getvalue() and "\x1b[31m" not in term.getvalue()


def test_quiet_off_a_terminal_and_with_q():
    pipe = io.StringIO()  # not a terminal
    Progress(stream=pipe)(_event(1, 3))
    assert pipe.getvalue() == ""
    term = Terminal()
    Progress(stream=term, quiet=True)(_event(1, 3))
    assert term.getvalue() == ""


def test_verbose_prints_one_line_per_plate_and_pooled_step():
    pipe = io.StringIO()
    p = Progress(stream=pipe, verbose=True)
    p(_event(1, 2, plate="plate-00"))
    p(_event(2, 2, plate="plate-01", error="x.csv: row 3: bad\nmore"))
    p(_event(2, 2, step="fit:nls"))
    lines = pipe.getvalue().splitlines()
    assert lines[0] == "  [1/2] plate plate-00 done (1.0 s)"
    assert lines[1] == "  [2/2] plate plate-01 failed: x.csv: row 3: bad (1.0 s)"
    assert lines[2].startswith("  fit:nls on the pooled plates")


def test_verbose_run_reports_plates_on_stderr(tmp_path: Path, capsys):
    recipe = demo_batch(tmp_path / "in", 2, broken=(1,), fit=False)
    assert main(["run", str(recipe), "--out", str(tmp_path / "out"), "-v"]) == 1
    err = capsys.readouterr().err
    assert "[1/2] plate plate-00 done" in err and "[2/2] plate plate-01 failed" in err


def test_debug_shows_the_traceback_otherwise_one_line(tmp_path: Path, capsys):
    recipe = tmp_path / "r.yaml"
    recipe.write_text("vzero: 1\nplates: []\nsteps: [{rates: {method: nope}}]\n", "utf-8")
    assert main(["check", str(recipe)]) == 2
    assert "Traceback" not in capsys.readouterr().err
    with pytest.raises(RecipeError):
        main(["check", str(recipe), "--debug"])


def test_internal_error_exits_3_with_one_line(monkeypatch, tmp_path: Path, capsys):
    import vzero.run.runner

    def broken(*args, **kwargs):
        raise ZeroDivisionError("division by zero")

    monkeypatch.setattr(vzero.run.runner, "check_inputs", broken)
    assert main(["check", str(tmp_path / "r.yaml")]) == 3
    err = capsys.readouterr().err
    assert "internal error (ZeroDivisionError" in err and "--debug" in err and "Traceback" not in err
    assert "output folder" not in err  # check writes no folder, so the message does not speak of one
    with pytest.raises(ZeroDivisionError):
        main(["check", str(tmp_path / "r.yaml"), "--debug"])
    monkeypatch.setattr(vzero.run.runner, "run", broken)
    assert main(["run", str(tmp_path / "r.yaml"), "--out", str(tmp_path / "out")]) == 3
    assert "nothing was written to the output folder" in capsys.readouterr().err


@pytest.mark.parametrize("jobs", ["0", "two"])
def test_bad_jobs_is_a_usage_error(jobs: str, capsys):
    with pytest.raises(SystemExit) as stop:
        main(["run", "r.yaml", "--out", "o", "--jobs", jobs])
    assert stop.value.code == 2
    assert "--jobs" in capsys.readouterr().err


def test_plugins_params_lists_settings_and_model_parameters(capsys):
    assert main(["plugins", "--params"]) == 0
    out = capsys.readouterr().out
    assert "end: a quantity like" in out  # a stage method's setting
    assert "parameters: Vmax, Km" in out  # a fit model's parameter names
