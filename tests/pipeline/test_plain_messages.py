"""Messages are full sentences, unit messages say what is missing, and no Python warning leaks out."""

from __future__ import annotations

import warnings
from pathlib import Path

import pytest
from vzero import units
from vzero.errors import InputFileError, OutputExistsError, UnitError, join_sentences
from vzero.run.runner import run

CONFIGS = Path(__file__).resolve().parents[2] / "configs"


def test_message_and_hint_never_run_together():
    err = OutputExistsError("report.html already exists", hint="Pass --force to replace it")
    assert str(err) == "report.html already exists. Pass --force to replace it."
    err = InputFileError("header row without data rows below it", path="p.csv", row=3, hint="Is the export cut?")
    assert str(err) == "p.csv, row 3: header row without data rows below it. Is the export cut?"
    assert join_sentences("no blank wells: signal left uncorrected", "add blanks") == \
        "no blank wells: signal left uncorrected. Add blanks."


@pytest.mark.parametrize(("text", "like", "said"), [
    ("2000 RFU", "RFU/uM", 'has no concentration unit; a value per concentration needs a concentration unit '
                           'below the line, e.g. "2000 RFU/uM"'),
    ("0.55", "cm", 'has no length unit; it needs a length unit, e.g. "0.55 cm"'),
])
def test_unit_messages_say_what_is_missing(text, like, said):
    with pytest.raises(UnitError) as err:
        units.quantity(text, like=like, what="value")
    assert said in str(err.value) and "got no unit" not in str(err.value)


def test_hidden_python_warnings_are_shown_with_verbose(tmp_path: Path, capsys, monkeypatch):
    import vzero.run.runner
    from vzero.cli.main import main

    def noisy(recipe, **kwargs):
        warnings.warn("Mean of empty slice", RuntimeWarning, stacklevel=1)
        return vzero.run.runner.CheckResult(vzero.run.runner.load(CONFIGS / "demo.yaml"), [], [])

    monkeypatch.setattr(vzero.run.runner, "check_inputs", noisy)
    recipe = str(CONFIGS / "demo.yaml")
    assert main(["check", recipe]) == 0
    assert "RuntimeWarning" not in capsys.readouterr().err
    assert main(["check", recipe, "--verbose"]) == 0
    assert "python warning: RuntimeWarning: Mean of empty slice" in capsys.readouterr().err


@pytest.mark.parametrize("recipe", sorted(p.name for p in CONFIGS.glob("*.yaml")))
def test_every_config_runs_with_python_warnings_as_errors(recipe: str, tmp_path: Path):
    """The recipes beside their data in configs/ (the cookbook's, whose data the tests write, are run the
    same way in tests/test_cookbook.py)."""
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        result = run(CONFIGS / recipe, tmp_path / "out")
    assert result.audit_path.is_file()
