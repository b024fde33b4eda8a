"""Numbers in the report's sentences go through one formatter: p-values as "p = 0.03" / "p < 0.001",
other numbers to a few significant figures, estimates with their error and interval rounded together."""

from __future__ import annotations

import html
import re
from pathlib import Path

import pytest
from vzero.plugins.report import content


@pytest.mark.parametrize("p, text", [
    (0.0312, "p = 0.031"), (0.03, "p = 0.03"), (0.5, "p = 0.5"), (0.00099, "p < 0.001"),
    (3.2e-12, "p < 0.001"), (0.001, "p = 0.001"), (float("nan"), "p not determined"),
])
def test_p_values_as_written_in_papers(p: float, text: str):
    # common practice (e.g. the APA Publication Manual, 7th ed., 6.36): exact p to two significant figures,
    # and "p < .001" below that
    assert content.p_text(p) == text


def test_numbers_in_a_stages_sentence_are_rewritten():
    reason = ("profile interval of h excludes 1; F-test against Michaelis–Menten p = 3.41e-07; "
              "lowest AICc (next best 1.2e+02 higher); F = 12.3456, p = 0.0456 ≥ 0.05; 10–90 % of Vmax")
    out = content.prose(reason)
    assert "p < 0.001" in out and "p = 0.046" in out and "F = 12.3" in out
    assert "120 higher" in out and "≥ 0.05" in out and "10–90 %" in out and "excludes 1" in out
    assert not re.search(r"\d[eE][-+]?\d", out)  # no raw exponent left


def test_plain_numbers():
    assert [content.plain(x) for x in (0.05, 12.5, 1200.0, 20381.0, 0.99934, 3.2e-5, 2.5e6)] == [
        "0.05", "12.5", "1200", "20400", "0.999", "3.2 × 10⁻⁵", "2.5 × 10⁶"]


def test_no_raw_number_in_the_sentences_of_a_report(fluor_run: Path):
    page = html.unescape((fluor_run / "report" / "report.html").read_text("utf-8"))
    sentences = re.findall(r'<p class="(?:verdict[^"]*|lead[^"]*)">(.*?)</p>', page, re.S)
    sentences += re.findall(r"<caption>Model comparison \(same wells\)\.(.*?)</caption>", page, re.S)
    sentences += re.findall(r"against [^<]*: F = [^<]*", page)
    assert sentences
    for text in sentences:
        assert not re.search(r"\d[eE][-+]?\d", text), text  # no 1.2e-05
        assert not re.search(r"\d\.\d{5,}", text), text  # no unrounded 0.123456
        assert not re.search(r"\bp = 0\.000", text), text  # small p-values are "p < 0.001"
