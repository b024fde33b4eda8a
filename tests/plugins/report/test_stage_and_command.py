"""The report as a pipeline step and as `vzero report RUN.h5`, on a small run with no fit step."""

from __future__ import annotations

from pathlib import Path

from vzero.cli.main import main


def test_the_step_writes_the_report_and_figures(finished_run: Path):
    names = sorted(p.name for p in (finished_run / "figures").iterdir())
    # no fit step: plate figures and, per group, the rates against substrate without curves
    assert names == ["plate-map_p1.png", "plate-map_p1.svg", "progress-curves_p1.png", "progress-curves_p1.svg",
                     "rates-vs-substrate_g.png", "rates-vs-substrate_g.svg"]
    text = (finished_run / "report.html").read_text("utf-8")
    assert "Not in this run: fits" in text  # no fit step: said, not failed
    assert "Research use only." in text
    # the rates in this recipe stay in AU/s, so the rate lines are drawn
    assert "orange line" in text or "The orange line" in text


def test_command_rebuilds_the_report_from_the_audit_file(finished_run: Path, tmp_path: Path, capsys):
    out = tmp_path / "again"
    assert main(["report", str(finished_run / "run.h5"), "--out", str(out)]) == 0
    assert "wrote" in capsys.readouterr().out
    assert sorted(p.name for p in (out / "figures").iterdir()) == sorted(
        p.name for p in (finished_run / "figures").iterdir())
    text = (out / "report.html").read_text("utf-8")
    # from the audit file the report knows the inputs' hashes and the recipe text
    assert "sha256" in text and "plate.csv" in text and "Recipe as written" in text
    # a second time without --force refuses (exit 2: bad usage) and leaves the report alone
    before = (out / "report.html").read_bytes()
    assert main(["report", str(finished_run / "run.h5"), "--out", str(out)]) == 2
    assert "--force" in capsys.readouterr().err
    assert (out / "report.html").read_bytes() == before


def test_command_names_a_missing_audit_file(tmp_path: Path, capsys):
    assert main(["report", str(tmp_path / "nope.h5")]) == 2
    assert "nope.h5" in capsys.readouterr().err


def test_the_run_and_the_command_write_the_same_report(finished_run: Path, tmp_path: Path):
    """Everything but the line saying when and from what the report was made is the same, byte for byte,
    figures included: the parameters as written, the step plugins, the software, the run's start."""
    import re

    out = tmp_path / "same"
    assert main(["report", str(finished_run / "run.h5"), "--out", str(out)]) == 0
    made = re.compile(r"<dt>report made</dt><dd>[^<]*</dd>")
    during = (finished_run / "report.html").read_text("utf-8")
    after = (out / "report.html").read_text("utf-8")
    assert len(made.findall(during)) == 1 and len(made.findall(after)) == 1
    assert made.sub("", during) == made.sub("", after)
    # the parameters as written, during the run too
    assert "<code>{&#34;end&#34;: &#34;300 s&#34;, &#34;start&#34;: &#34;0 s&#34;}</code>" in during
