"""The HTML page builder and the figure helpers: escaping, self-containment, stable bytes.

Outside references used here: the standard library's HTML parser (what a page
contains), ``hashlib``/``base64`` (the Content-Security-Policy hashes, whose
format is fixed by the W3C CSP Level 2 recommendation, "hash-source" — common
practice), ``zlib.crc32`` and the PNG chunk layout (PNG specification, W3C
Recommendation 2003, section 5.3: length, type, data, CRC-32 over type+data).
"""

from __future__ import annotations

import base64
import hashlib
import struct
import zlib
from html.parser import HTMLParser

import numpy as np
import pytest

from fractalseq.errors import OutputError
from fractalseq.report import figures
from fractalseq.report.html import HtmlReport, Link, format_value

EVIL = "<script>alert(1)</script>"


class Collector(HTMLParser):
    """Collects tags, attributes and text of a page with the standard library's parser."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.tags: list[tuple[str, dict]] = []
        self.text: list[str] = []
        self.inside: list[str] = []
        self.raw: dict[str, list[str]] = {"script": [], "style": []}

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))
        self.inside.append(tag)

    def handle_endtag(self, tag):
        if self.inside and self.inside[-1] == tag:
            self.inside.pop()

    def handle_data(self, data):
        if self.inside and self.inside[-1] in self.raw:
            self.raw[self.inside[-1]].append(data)
        else:
            self.text.append(data)


def parse(page: str) -> Collector:
    c = Collector()
    c.feed(page)
    c.close()
    return c


def tiny_png() -> bytes:
    with figures.style():
        fig, ax = figures.figure(2, 2)
        ax.plot([0, 1], [0, 1])
        return figures.fig_to_png(fig, dpi=40)


def png_chunks(data: bytes) -> list[tuple[bytes, bytes]]:
    """Split a PNG into (type, data) chunks, checking every CRC (PNG spec 5.3)."""
    assert data[:8] == b"\x89PNG\r\n\x1a\n"
    pos, out = 8, []
    while pos < len(data):
        (length,) = struct.unpack(">I", data[pos : pos + 4])
        ctype = data[pos + 4 : pos + 8]
        body = data[pos + 8 : pos + 8 + length]
        (crc,) = struct.unpack(">I", data[pos + 8 + length : pos + 12 + length])
        assert crc == zlib.crc32(ctype + body) & 0xFFFFFFFF, f"bad CRC in chunk {ctype!r}"
        out.append((ctype, body))
        pos += 12 + length
    return out


def sample_page() -> HtmlReport:
    page = HtmlReport(f"Profile of {EVIL}", subtitle="a & b", caution="Genomic output is for research, not for clinical decisions.")
    page.paragraph(f"from {EVIL}")
    page.section(f"Section {EVIL}")
    page.table(["q", f"name {EVIL}", "D_q"], [[2, EVIL, 1.23456789], [0, "x", None], [1, Link("sub", "a/index.html"), float("nan")]],
               caption=EVIL)
    page.key_values([(EVIL, EVIL), ("length", 48502)])
    page.figure(tiny_png(), caption=EVIL, alt=EVIL)
    page.note(EVIL, [EVIL])
    page.bullets([EVIL, Link(EVIL, "b/index.html")])
    return page


def test_every_text_is_escaped_and_only_our_script_exists():
    page = sample_page().render()
    doc = parse(page)
    scripts = [t for t, _ in doc.tags if t == "script"]
    assert len(scripts) == 1  # the table sorter, nothing from the input
    assert "alert(1)" not in "".join(doc.raw["script"])
    # the injected text survives as visible text, once per place it was given
    visible = "".join(doc.text)
    assert visible.count(EVIL) >= 9
    # no attribute carries an event handler, no img came from the input
    assert not any(k.startswith("on") for _, attrs in doc.tags for k in attrs)
    imgs = [a for t, a in doc.tags if t == "img"]
    assert len(imgs) == 1 and imgs[0]["alt"] == EVIL


def test_page_is_self_contained_and_csp_hashes_match():
    page = sample_page().render()
    doc = parse(page)
    for tag, attrs in doc.tags:
        for key in ("src", "href"):
            if key in attrs:
                v = attrs[key]
                assert v.startswith(("data:", "#")) or ":" not in v.split("/")[0], (tag, v)
    assert "http://" not in page and "https://" not in page
    assert "@import" not in page and "url(" not in page
    csp = next(a["content"] for t, a in doc.tags if t == "meta" and a.get("http-equiv") == "Content-Security-Policy")
    assert "default-src 'none'" in csp
    for kind in ("script", "style"):
        body = "".join(doc.raw[kind])
        digest = base64.b64encode(hashlib.sha256(body.encode()).digest()).decode()
        assert f"'sha256-{digest}'" in csp, f"CSP does not allow the page's own {kind}"


def test_caution_box_and_sections_are_visible():
    doc = parse(sample_page().render())
    asides = [a for t, a in doc.tags if t == "aside"]
    assert asides and asides[0]["class"] == "caution"
    assert "Genomic output is for research, not for clinical decisions." in "".join(doc.text)
    assert any(t == "nav" for t, _ in doc.tags)
    no_caution = parse(HtmlReport("t").render())
    assert not any(t == "aside" for t, _ in no_caution.tags)


def test_table_cells_format_and_sort_keys():
    page = HtmlReport("t")
    page.table(["a", "b"], [[1.23456789, 3], [None, True], [float("inf"), -0.5]])
    doc = parse(page.render())
    tds = [a for t, a in doc.tags if t == "td"]
    assert [a.get("data-v") for a in tds] == [repr(1.23456789), "3", "", "1", "1e308", repr(-0.5)]
    assert format_value(1.23456789) == "1.2346"
    assert format_value(None) == "–" and format_value(float("nan")) == "–"
    assert format_value(-0.5) == "-0.5"
    assert format_value(np.int64(7)) == "7" and format_value(np.float32(0.25)) == "0.25"


def test_bad_inputs_are_refused(tmp_path):
    page = HtmlReport("t")
    with pytest.raises(ValueError):
        page.figure(b"GIF89a....", "c", "a")
    with pytest.raises(ValueError):
        Link("x", "javascript:alert(1)")
    with pytest.raises(ValueError):
        Link("x", 'a" onclick="alert(1)')
    out = page.write(tmp_path / "r.html")
    with pytest.raises(OutputError):
        page.write(out)
    page.write(out, force=True)
    assert out.read_text().startswith("<!DOCTYPE html>")


def test_figure_pngs_decode_and_are_byte_stable():
    import matplotlib.image as mpimg
    import io

    rng = np.random.default_rng(1)
    img = rng.poisson(3.0, size=(64, 64))
    makers = [
        lambda: figures.encoding_png(img, "src.fa", labels="ACGT", corners=np.array([[0, 0], [0, 1], [1, 0], [1, 1.0]])),
        lambda: figures.scaling_png("src.fa", [figures.ScalingSeries("q=0", np.arange(1, 8) * np.log(2),
                                                                     np.arange(1, 8) * 1.3, 1, 5, 1.3 / np.log(2), 0.0)],
                                    "ln N (nats)"),
        lambda: figures.spectrum_png("src.fa", [0, 1, 2], [2.0, 1.9, 1.8], [1.95, 1.85, 1.7], [2.0, 1.95, 1.9]),
        lambda: figures.falpha_png("src.fa", [1.8, 1.9, 2.0, 2.2], [1.6, 1.9, 2.0, 1.7], q=[2, 1, 0, -1]),
        lambda: figures.entropy_png("src.fa", [1, 2, 3], {"plug-in": [2.0, 1.95, np.nan]}, {"LZ76": 1.97}, max_bits=2.0,
                                    valid_upto=2),
        lambda: figures.heatmap_png(np.eye(3), ["a", "b", "c"], "Distances", "distance (bits)"),
        lambda: figures.series_png([0, 1, 2], {"h": [1, 2, 1]}, "Scan", "position (symbols)", "bits", marks=[1]),
    ]
    for i, make in enumerate(makers):
        a = make()
        if i < 2:
            assert a == make(), "same figure, different bytes"
        types = [t for t, _ in png_chunks(a)]
        assert types[0] == b"IHDR" and types[-1] == b"IEND"
        text = b"".join(body for t, body in png_chunks(a) if t in (b"tEXt", b"iTXt", b"zTXt"))
        assert b"Software" not in text and b"matplotlib version" not in text
        arr = mpimg.imread(io.BytesIO(a), format="png")
        assert arr.shape[0] > 100 and arr.shape[1] > 100
        assert arr[..., :3].std() > 0.01  # not a blank canvas


def test_short_names():
    assert figures.short("abc") == "abc"
    s = figures.short("x" * 100, 20)
    assert len(s) == 20 and "…" in s


def test_figures_leave_matplotlib_global_state_alone():
    """Every report figure is a Figure with its own Agg canvas: drawing the drift, scan, density, survey
    and profile figures in a fresh interpreter loads no pyplot and switches no backend (rules of this
    code base, DEVELOPERS.md)."""
    import subprocess
    import sys

    code = """
import sys, numpy as np, matplotlib
from fractalseq import alphabet as al, encoding
from fractalseq.compare._scan import scan_stream
from fractalseq.datasets._markov import simulate_markov
from fractalseq.report import figures, survey
from fractalseq.report.density import density_figure
from fractalseq.report.scan import scan_figure, scan_png
from fractalseq.stream import from_codes
backend = matplotlib.rcParams._get_backend_or_none()
rng = np.random.default_rng(3)
codes = np.concatenate([rng.integers(0, 4, 3000), np.tile([0, 1], 1000), rng.integers(0, 4, 3000)]).astype(np.uint8)
arr = from_codes(al.dna(), codes, name="invented")
res = scan_stream(arr, 400, 100)
fig = scan_figure(res)
from matplotlib.figure import Figure
from matplotlib.backends.backend_agg import FigureCanvasAgg
assert isinstance(fig, Figure) and isinstance(fig.canvas, FigureCanvasAgg)
assert len(fig.axes) == len(res.series)
assert scan_png(res)[:8] == b"\\x89PNG\\r\\n\\x1a\\n"
dens = density_figure(encoding.points(arr, 0.5), "t", tuple("ACGT"), encoding.corner_layout(4))
assert isinstance(dens, Figure) and isinstance(dens.canvas, FigureCanvasAgg)
from fractalseq.compare._distances import cluster
d = np.array([[0.0, 0.4], [0.4, 0.0]])
spec = [{"q": 0, "estimate": 2.0, "low": 1.9, "high": 2.0}]
view = survey.SurveyView(sources=({"name": "a", "spectrum": spec}, {"name": "b", "spectrum": spec}), names=("a", "b"),
                         js=d, spectrum=d, js_depth=3, clustering=cluster(d), header=("name",),
                         rows=(("a",), ("b",)), notes=(), subtitle="invented", caution="invented data")
for draw in (survey.spectra_png, survey.dendrogram_png, survey.heatmap_png):
    assert draw(view)[:8] == b"\\x89PNG\\r\\n\\x1a\\n"
assert "matplotlib.pyplot" not in sys.modules, "pyplot was imported"
assert matplotlib.rcParams._get_backend_or_none() == backend, "the backend was switched"
print("ok")
"""
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    assert out.returncode == 0 and out.stdout.strip() == "ok", out.stderr[-2000:]
