"""Regenerate docs/gallery/ from invented data (the demo and two cookbook plates): every report figure kind as
PNG (plate map, progress curves, rates with fits, transforms, inhibition, substrate inhibition, standard
curve), screenshots of the reports and of the review page in headless Chromium (when installed), and
docs/gallery/README.md showing them with their captions.

Run from the repository root::

    python docs/make_gallery.py

The gallery is generated, never edited by hand: change the report code, then run this script and commit the
result. The demo data are invented (no real enzyme, lab or measurement).
"""

from __future__ import annotations

import argparse
import shutil
import sys
import tempfile
from html.parser import HTMLParser
from pathlib import Path
from typing import Any

GALLERY = Path(__file__).resolve().parent / "gallery"
DRIVER = Path(__file__).resolve().parents[1] / "tests" / "plugins" / "report" / "chromium.py"


def _browser_driver() -> tuple[Any, Any]:
    """``check_page`` and ``find_browser`` of the headless-Chromium driver the browser test uses (a test
    helper, not part of the installed package), loaded from its file."""
    module = _module(DRIVER, "vzero_test_chromium")
    return module.check_page, module.find_browser


class _Figures(HTMLParser):
    """Collects (name, title, caption) of every <figure id="fig-NAME"> in the report."""

    def __init__(self) -> None:
        super().__init__()
        self.found: list[tuple[str, str, str]] = []
        self._name: str | None = None
        self._in_caption = False
        self._skip = 0
        self._text: list[str] = []

    def handle_starttag(self, tag: str, attrs: list[tuple[str, str | None]]) -> None:
        a = dict(attrs)
        if tag == "figure" and (a.get("id") or "").startswith("fig-"):
            self._name = (a["id"] or "")[4:]
        elif tag == "figcaption" and self._name:
            self._in_caption, self._text = True, []
        elif tag == "span" and self._in_caption and a.get("class") == "files":
            self._skip += 1

    def handle_endtag(self, tag: str) -> None:
        if tag == "span" and self._skip:
            self._skip -= 1
        elif tag == "figcaption" and self._in_caption and self._name:
            text = " ".join("".join(self._text).split())
            title, _, caption = text.partition(". ")
            self.found.append((self._name, title, caption))
            self._in_caption, self._name = False, None

    def handle_data(self, data: str) -> None:
        if self._in_caption and not self._skip:
            self._text.append(data)


COOKBOOK_DATA = Path(__file__).resolve().parents[1] / "tests" / "cookbook_data.py"
COOKBOOK = Path(__file__).resolve().parents[1] / "configs" / "cookbook"

SHOWN = (
    ("demo", "the invented demo (`vzero demo`): a 96-well absorbance plate, a cooperative enzyme and a variant"),
    ("inhibitor-matrix", "cookbook `inhibitor-matrix.yaml`: substrate along the columns, inhibitor down the rows"),
    ("fluorescence-standard-curve", "cookbook `fluorescence-standard-curve.yaml`: a 384-well fluorescence "
     "plate with a standard curve, blanks and a substrate-inhibition group"),
)
"""The runs the gallery shows: (name, what it is). Every figure kind of the report appears in one of them."""

REVIEW_CLICKS = """(async () => {
  const key = k => document.dispatchEvent(new KeyboardEvent('keydown', {key: k, bubbles: true}));
  key('x'); key('j'); key('k'); key('j'); key('x'); key('j');
  document.getElementById('save').click(); return 1; })()"""
"""A reader's first decisions on the review page (exclude, keep, exclude), saved, before the screenshot."""

LINK_CLICK = """(async () => {
  const link = document.querySelector('figure[id^="fig-progress-curves"] a.well-link');
  if (!link) { return null; }
  const box = link.querySelector('rect').getBoundingClientRect();
  link.dispatchEvent(new MouseEvent('click', {bubbles: true, cancelable: true, view: window}));
  await new Promise(r => setTimeout(r, 50));
  return {hash: location.hash, title: link.querySelector('title').textContent, width: box.width};
})()"""
"""A reader clicks the first flagged cell of the progress-curve figure; the screenshot shows where it leads."""


def _module(path: Path, name: str) -> Any:
    import importlib.util

    spec = importlib.util.spec_from_file_location(name, path)
    if spec is None or spec.loader is None:
        raise SystemExit(f"cannot load {path}")
    module = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = module
    spec.loader.exec_module(module)
    return module


def run_demo(folder: Path) -> Path:
    """Run the demo recipe (with its report step) in ``folder``; return the run folder."""
    from vzero.plugins.demo import write_demo
    from vzero.run.runner import run

    recipe = write_demo(folder / "inputs")
    return run(recipe, folder / "run").out_dir


def run_cookbook(name: str, folder: Path) -> Path:
    """Run a cookbook recipe on its invented data (tests/cookbook_data.py) and write its report."""
    from vzero.plugins.report.build import build
    from vzero.plugins.report.command import write_files
    from vzero.plugins.report.sources import from_audit
    from vzero.run.runner import run

    writers = _module(COOKBOOK_DATA, "vzero_gallery_cookbook_data").WRITERS
    (folder / "inputs").mkdir(parents=True)
    writers[f"{name}.yaml"](folder / "inputs")
    shutil.copy(COOKBOOK / f"{name}.yaml", folder / "inputs" / "recipe.yaml")
    out = run(folder / "inputs" / "recipe.yaml", folder / "run").out_dir
    if not (out / "report.html").exists():
        write_files(out, build(from_audit(out / "run.h5")), force=False)
    return out


def write_review(run_dir: Path) -> Path:
    """The review page of a run (what ``vzero review run.h5`` writes)."""
    from vzero.plugins.report.review import page_data, render
    from vzero.plugins.report.sources import from_audit

    page = run_dir / "review.html"
    page.write_text(render(page_data(from_audit(run_dir / "run.h5"))), "utf-8")
    return page


def write_gallery(runs: list[tuple[str, str, Path]], gallery: Path, screenshot: bool = True) -> list[str]:
    """Copy every run's PNG figures, take the screenshots (report tops and the review page), write README.md.
    ``runs`` are (name, description, run folder). Returns the files written."""
    gallery.mkdir(parents=True, exist_ok=True)
    for old in gallery.glob("*.png"):
        old.unlink()
    written: list[str] = []
    lines = [
        "# Report gallery",
        "",
        "<!-- Generated by docs/make_gallery.py from invented data. Do not edit by hand: run",
        "     `python docs/make_gallery.py` from the repository root and commit the result. -->",
        "",
        "What a run puts in `report.html` and `figures/`, and the review page `vzero review run.h5` writes, made",
        "from invented plates (hypothetical enzymes; no real lab, enzyme or measurement). Each figure is also",
        "written as SVG beside the PNG. See [docs/report.md](../report.md) for how to read each part.",
        "",
        "Research use only: the report's numbers come from an automated analysis; check them against your lab's",
        "validated procedures.",
        "",
    ]
    browser = None
    check_page = None
    if screenshot:
        check_page, find_browser = _browser_driver()
        browser = find_browser()
        if browser is None:
            lines += ["(No screenshots: Chromium was not installed when this gallery was made.)", ""]
    for name, what, run_dir in runs:
        lines += [f"## {name}", "", f"Made from {what}.", ""]
        if browser is not None and check_page is not None:
            seen = check_page(run_dir / "report.html", browser, width=1280, height=1600)
            if seen.loaded_images != seen.total_images or seen.errors:
                raise SystemExit(f"the report of {name} did not load cleanly: {seen.broken} {seen.errors}")
            shot = f"report-screenshot_{name}.png"
            (gallery / shot).write_bytes(seen.screenshot)
            written.append(shot)
            lines += [f"The top of its `report.html` in headless Chromium (1280 × 1600 CSS pixels; the whole page "
                      f"is {seen.height} px tall):", "", f"![The top of the report: {name}]({shot})", ""]
        if browser is not None and check_page is not None and name == "fluorescence-standard-curve":
            seen = check_page(run_dir / "report.html", browser, width=1280, height=900, script=LINK_CLICK)
            if seen.errors or not seen.result or not str(seen.result.get("hash", "")).startswith("#well-"):
                raise SystemExit(f"a well link of {name} did not lead to its panel: {seen.result} {seen.errors}")
            shot = f"link-followed_{name}.png"
            (gallery / shot).write_bytes(seen.screenshot)
            written.append(shot)
            lines += [f"Every flagged sample well on the plate map and on the progress curves is a link to its "
                      f"panel (the tooltip names its flags: {seen.result['title']}). After a click on the first "
                      "flagged cell of the progress curves:", "", f"![A followed well link: {name}]({shot})", ""]
        parser = _Figures()
        parser.feed((run_dir / "report.html").read_text("utf-8"))
        for png in sorted((run_dir / "figures").glob("*.png")):
            shutil.copy(png, gallery / png.name)
            written.append(png.name)
        for fig, title, caption in parser.found:
            if f"{fig}.png" not in written:
                continue
            lines += [f"### {title}", "", f"![{title}]({fig}.png)", "", caption, "",
                      f"File in a run folder: `figures/{fig}.png` (and `.svg`).", ""]
        review = run_dir / "review.html"
        if review.exists() and browser is not None and check_page is not None:
            seen = check_page(review, browser, width=1280, height=1000, script=REVIEW_CLICKS)
            if seen.errors:
                raise SystemExit(f"the review page of {name} logged errors: {seen.errors}")
            shot = f"review-screenshot_{name}.png"
            (gallery / shot).write_bytes(seen.screenshot)
            written.append(shot)
            lines += ["### The review page", "",
                      "`vzero review run.h5` writes `review.html`: step through the flagged sample wells with the "
                      "keyboard or the mouse, keep or exclude each with a reason, and save every decision as a "
                      "recipe fragment (`review-decisions.yaml`, a `review:` list) that the recipe includes "
                      "(`include: [review-decisions.yaml]`) or `vzero rerun` takes as a second `--recipe`. Here "
                      "after three decisions:", "",
                      f"![The review page: {name}]({shot})", ""]
    (gallery / "README.md").write_text("\n".join(lines), "utf-8")
    return [*written, "README.md"]


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description="Regenerate docs/gallery/ from the demo.")
    p.add_argument("--out", default=str(GALLERY), help="gallery folder (default docs/gallery)")
    p.add_argument("--no-screenshot", action="store_true", help="skip the Chromium screenshot")
    args = p.parse_args(argv)
    with tempfile.TemporaryDirectory(prefix="vzero-gallery-") as tmp:
        runs = []
        for name, what in SHOWN:
            folder = Path(tmp) / name
            run_dir = run_demo(folder) if name == "demo" else run_cookbook(name, folder)
            runs.append((name, what, run_dir))
        write_review(runs[1][2])  # the inhibitor matrix has flagged sample wells to review
        files = write_gallery(runs, Path(args.out), screenshot=not args.no_screenshot)
    print(f"wrote {len(files)} files in {args.out}: {', '.join(files)}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
