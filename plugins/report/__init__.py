"""Built-in report stage (``report: {method: html}``) and the ``vzero report RUN.h5`` and ``vzero review
RUN.h5`` commands.

The stage runs last (scope ``final``) and returns ``report.html``, one self-contained file with every
figure inline, plus each figure as PNG and SVG under ``figures/``. This module stays light at import:
matplotlib, jinja2 and the figure code load only when a report is built.
"""

from __future__ import annotations

from typing import Any

from vzero import hookimpl
from vzero.params import Param
from vzero.stage import Stage, StageInput, StageOutput


class HtmlReport(Stage):
    """A report a scientist can open from a file share or an e-mail: summary and provenance, plate map,
    progress curves with their rate windows, rates against substrate with fitted curves, bands and
    residuals, linear transforms, parameter tables, model comparison, cooperativity verdict, flagged and
    excluded wells."""

    kind = "report"
    method = "html"
    version = "1.0"
    scope = "final"
    summary = "self-contained HTML report with figures (PNG and SVG under figures/)"
    params = {
        "title": Param("str", "", "title of the report (default: from the recipe name)"),
        "max_panels": Param("int", 384, "most wells drawn per progress-curve figure; bigger plates get a "
                            "subsample, flagged wells first", low=24, high=1536),
    }

    def run(self, data: StageInput) -> StageOutput:
        from vzero.plugins.report.build import build
        from vzero.plugins.report.sources import from_stage

        return StageOutput(files=build(from_stage(data, self.settings)))


@hookimpl
def vzero_register(registry: Any) -> None:
    registry.add(HtmlReport)


@hookimpl
def vzero_commands(commands: Any) -> None:
    from vzero.plugins.report import command, review

    commands.add("report", command.HELP, command.configure, command.run, command.EXAMPLE)
    commands.add("review", review.HELP, review.configure, review.run, review.EXAMPLE)
