"""HTML reports in a real browser (headless Chromium, networking off, fresh profile folder).

A missing Chromium is a failure, not a skip (Debian packages chromium and chromium-driver).  The helper
:func:`browser_check.check_report_in_browser` is shared with the other reports' tests (survey, drift, scan,
demo); the negative controls below show that it does fail on a broken page.
"""

from __future__ import annotations

import numpy as np
import pytest

from browser_check import check_report_in_browser, click_sort
from fractalseq.cli.app import main
from fractalseq.report.figures import fig_to_png, figure, style
from fractalseq.report.html import HtmlReport

#: Whole processes or many of them: part of every CI run; skip in a quick loop with -m 'not slow'.
pytestmark = pytest.mark.slow

EVIL = "<script>alert(1)</script>"


@pytest.fixture(scope="module")
def profile_folder(tmp_path_factory):
    """A profile report written by the command line from an invented FASTA with a hostile header."""
    d = tmp_path_factory.mktemp("browser")
    rng = np.random.default_rng(21)
    seq = "".join(rng.choice(list("ACGT"), 5000))
    fa = d / "hostile <b>name.fa"
    fa.write_text(f">{EVIL} invented record\n" + "\n".join(seq[i : i + 60] for i in range(0, len(seq), 60)) + "\n")
    out = d / "out"
    assert main(["profile", str(fa), "--out", str(out), "--boot", "20", "--quiet"]) == 0
    return out


def test_profile_report_renders_cleanly(profile_folder):
    subs = [p for p in profile_folder.iterdir() if p.is_dir()]
    assert len(subs) == 1
    seen = check_report_in_browser(
        subs[0] / "index.html", min_tables=5, min_images=5, expect_text=[EVIL, "hostile <b>name.fa"]
    )
    assert len(seen["images"]) == 5
    assert all(i["w"] >= 300 for i in seen["images"])


def test_profile_index_renders_cleanly(profile_folder):
    seen = check_report_in_browser(profile_folder / "index.html", min_tables=1, expect_text=["hostile <b>name.fa"])
    assert seen["tables"] == [1]


def test_tables_sort_by_number_on_click(tmp_path):
    page = HtmlReport("sorting")
    page.table(["value", "label"], [[10, "ten"], [2, "two"], [1.5, "one and a half"], [None, "missing"], [-3, "minus"]])
    path = page.write(tmp_path / "sort.html")
    assert click_sort(path, 0, 0) == ["-3", "1.5", "2", "10", "–"]


# ------------------------------------------------------------ negative controls
def _raw(tmp_path, name: str, body: str) -> str:
    p = tmp_path / name
    p.write_text(f"<!DOCTYPE html><html><head><meta charset='utf-8'><title>t</title></head><body>{body}"
                 "<table><tbody><tr><td>1</td></tr></tbody></table></body></html>")
    return p


def test_checker_fails_on_a_broken_image(tmp_path):
    with pytest.raises(AssertionError, match="do not decode"):
        check_report_in_browser(_raw(tmp_path, "img.html", '<img src="data:image/png;base64,iVBORw0KGgoAAAA=" alt="x">'))


def test_checker_fails_on_a_script_error(tmp_path):
    with pytest.raises(AssertionError, match="console errors"):
        check_report_in_browser(_raw(tmp_path, "err.html", '<script>throw new Error("boom")</script>'))


def test_checker_fails_on_an_unescaped_script(tmp_path):
    with pytest.raises(AssertionError, match="alert"):
        check_report_in_browser(_raw(tmp_path, "alert.html", EVIL))


def test_checker_fails_on_a_network_resource(tmp_path):
    with pytest.raises(AssertionError):
        check_report_in_browser(_raw(tmp_path, "net.html", '<img src="http://example.invalid/x.png" alt="x">'))


def test_checker_fails_without_tables_or_images(tmp_path):
    page = HtmlReport("empty")
    page.paragraph("nothing")
    path = page.write(tmp_path / "empty.html")
    with pytest.raises(AssertionError, match="tables"):
        check_report_in_browser(path, min_tables=1)
    with style():
        fig, ax = figure(2, 2)
        ax.plot([0, 1])
        png = fig_to_png(fig, dpi=40)
    page.figure(png, "c", "a")
    path = page.write(tmp_path / "one.html")
    check_report_in_browser(path, min_tables=0, min_images=1)
    with pytest.raises(AssertionError, match="images"):
        check_report_in_browser(path, min_tables=0, min_images=2)
