"""Write the report folder of one profile, and the index page over several.

Folder of one source (:func:`write_profile_report`)::

    index.html        self-contained page (figures inline, sortable tables)
    profile.json      the JSON contract (a ``sources`` list with this one source)
    dimensions.csv    D_q with intervals and scaling ranges (the orders asked)
    spectrum.csv      D_q and f(alpha) on the whole grid of orders
    rates.csv         entropy-rate estimates and bounds
    entropies.csv     block entropies by block length
    consistency.csv   geometric D_q log2(1/k) against h_q, with the verdict
    absent_words.csv  absent words under a low-order Markov model
    permutation.csv   permutation entropy by order (ordinal-pattern streams only)
    encoding.png  scaling.png  spectrum.png  falpha.png  entropies.png

JSON and CSV bytes depend only on the input, the parameters and the seed;
PNG bytes are written without software metadata so they are stable too.

The report sits below the jobs that compute a profile: the JSON document and
the caution text are handed in by the caller
(:func:`fractalseq.jobs._profile.contract`, ``CAUTION_GENOMIC`` /
``CAUTION_GENERAL``), and a profile result is read only through its
attributes.
"""

from __future__ import annotations

import math
import re
from pathlib import Path
from typing import TYPE_CHECKING, Sequence

from fractalseq.encoding import corner_layout
from fractalseq.io._outputs import prepare_folder, write_bytes, write_csv, write_json
from fractalseq.report import figures
from fractalseq.report.html import HtmlReport, Link

if TYPE_CHECKING:  # for annotations only: the report never imports the jobs layer at run time
    from fractalseq.jobs._profile import ProfileResult

#: Event templates listed in the report of a log (the JSON keeps all of them).
TOP_TEMPLATES = 20

FIGURES = ("encoding.png", "scaling.png", "spectrum.png", "falpha.png", "entropies.png")
GENOMIC_ALPHABETS = ("dna", "rna", "protein")

RATE_LABELS = {
    "plugin": "plug-in, H(n+1) − H(n)",
    "miller-madow": "Miller–Madow, H(n+1) − H(n)",
    "grassberger": "Grassberger, H(n+1) − H(n)",
    "lz76": "Lempel–Ziv 1976",
    "compressors": "best general-purpose compressor",
    "online_predictor": "online predictor code length",
}


def is_genomic(results: Sequence[ProfileResult]) -> bool:
    """Whether any of the profiles reads a sequence alphabet (the page then carries the genomic caution)."""
    return any(r.alphabet.name in GENOMIC_ALPHABETS for r in results)


def safe_name(name: str, taken: set[str] | None = None) -> str:
    """A folder name derived from a source name: letters, digits, ``.-_`` only, unique within ``taken``."""
    base = Path(str(name)).name if name not in ("-", "") else "stdin"
    base = re.sub(r"[^A-Za-z0-9._-]+", "_", base).strip("._-") or "source"
    base = base[:80]
    out = base
    i = 2
    while taken is not None and out.lower() in taken:
        out = f"{base}-{i}"
        i += 1
    if taken is not None:
        taken.add(out.lower())
    return out


# -------------------------------------------------------------------- figures
def _fmt(v, digits: int = 4) -> str:
    if v is None or (isinstance(v, float) and not math.isfinite(v)):
        return "–"
    return f"{v:.{digits}f}"


def profile_figures(result: ProfileResult) -> dict[str, bytes]:
    """PNG bytes of every figure of the profile, by file name."""
    name = result.name
    out: dict[str, bytes] = {}
    A = result.alphabet_size
    corners = corner_layout(A)
    if result.image is not None:
        labels = tuple(result.alphabet.symbols) if A <= 16 else ()
        out["encoding.png"] = figures.encoding_png(
            result.image, name, labels=labels, corners=corners, ratio=result.ratio, one_dimensional=corners.shape[1] == 1
        )
    series = []
    for c in result.scaling:
        if c.x.size == 0:
            continue
        lo = c.fit_lo if c.fit_lo is not None else 0
        hi = c.fit_hi if c.fit_hi is not None else -1
        series.append(figures.ScalingSeries(f"q = {c.q:g}", c.x, c.y, lo, hi, c.slope, c.intercept))
    word_route = result.spectrum.route == "word counts"
    ylabel = "Rényi block entropy H_q (nats)" if word_route else "ln-scale partition sum, offset arbitrary (nats)"
    out["scaling.png"] = figures.scaling_png(name, series, ylabel, "slope = D_q")
    rows = result.spectrum_rows()
    ref = None
    ref_label = ""
    if not result.overlap.overlapping:
        ref = math.log(A) / math.log(1.0 / result.ratio)
        ref_label = f"all words equally likely: ln A / ln(1/k) = {ref:.4g}"
    out["spectrum.png"] = figures.spectrum_png(
        name, [r["q"] for r in rows], [r["estimate"] for r in rows], [r["low"] for r in rows], [r["high"] for r in rows],
        level=result.level, reference=ref, reference_label=ref_label,
    )
    fa = result.falpha_rows()
    out["falpha.png"] = figures.falpha_png(
        name, [p["alpha"] for p in fa], [p["f"] for p in fa], q=[p["q"] for p in fa],
        dimension_limit=ref, limit_label="all words equally likely: ln A / ln(1/k) =",
    )
    ent_rows = result.entropy_rows
    n = [r["depth"] for r in ent_rows]
    curves = {
        "plug-in  H(n) − H(n−1)": [r["difference_plugin"] for r in ent_rows],
        "Miller–Madow  H(n) − H(n−1)": [r["difference_miller-madow"] for r in ent_rows],
        "Grassberger  H(n) − H(n−1)": [r["difference_grassberger"] for r in ent_rows],
        "Grassberger  H(n)/n": [r["ratio_grassberger"] for r in ent_rows],
    }
    levels: dict[str, float] = {}
    for key, label in (("lz76", "LZ76"), ("compressors", "compressor bound"), ("online_predictor", "online predictor")):
        if key in result.rates:
            levels[label] = result.rates[key][1].estimate
    reliable = [r["depth"] for r in ent_rows if r.get("supported", r["reliable"])]
    out["entropies.png"] = figures.entropy_png(
        name, n, curves, levels, max_bits=math.log2(A), valid_upto=max(reliable) if reliable else 0,
    )
    return out


# ------------------------------------------------------------------ tables
def dimension_table(result: ProfileResult) -> tuple[list[str], list[list]]:
    header = ["q", "D_q", "low", "high", "stderr", "first depth", "last depth", "method", "flags"]
    rows = [
        [d["q"], d["estimate"], d["low"], d["high"], d["stderr"], d["scaling_range"][0], d["scaling_range"][1],
         d["method"], "; ".join(d["flags"])]
        for d in result.dimension_rows()
    ]
    return header, rows


def spectrum_table(result: ProfileResult) -> tuple[list[str], list[list]]:
    header = ["q", "D_q", "D_q low", "D_q high", "alpha", "alpha low", "alpha high", "f(alpha)", "f low", "f high", "flags"]
    fa = {p["q"]: p for p in result.falpha_rows()}
    rows = []
    for d in result.spectrum_rows():
        p = fa.get(d["q"], {})
        rows.append([d["q"], d["estimate"], d["low"], d["high"], p.get("alpha"), p.get("alpha_low"), p.get("alpha_high"),
                     p.get("f"), p.get("f_low"), p.get("f_high"), "; ".join(d["flags"])])
    return header, rows


def rate_table(result: ProfileResult) -> tuple[list[str], list[list]]:
    header = ["estimator", "kind", "bits per symbol", "low", "high", "block length n", "reliable", "within bounds", "note"]
    rows = []
    for key, r in result.rate_dict().items():
        rows.append([RATE_LABELS.get(key, key), r["kind"], r["estimate"], r["low"], r["high"], r["depth"], r["reliable"],
                     r.get("within_bounds"), r["note"]])
    return header, rows


def permutation_table(result: ProfileResult) -> tuple[list[str], list[list]]:
    """Permutation entropy by order k = 2..m (empty when the stream is not ordinal patterns)."""
    header = ["order", "H (bits)", "normalized", "H(k) − H(k−1) (bits)"]
    pe = result.permutation
    rows = [] if pe is None else [[r["order"], r["bits"], r["normalized"], r["increment_bits"]] for r in pe.by_order]
    return header, rows


def _permutation_section(page: HtmlReport, result: ProfileResult) -> None:
    pe = result.permutation
    if pe is None:
        return
    page.section("Ordinal patterns")
    page.paragraph(
        f"The stream holds ordinal patterns of order {pe.order} (delay {pe.delay}; ties ordered by {pe.ties}). "
        "Permutation entropy is the entropy of single patterns (Bandt and Pompe 2002), normalized by log2(m!); "
        f"consecutive patterns share {pe.order - 1} values, so a pattern has at most {pe.order} successors and the "
        f"per-step rate of the pattern stream is at most log2 {pe.order} = {pe.conditional_max_bits:.4f} bits."
    )
    fb = pe.forbidden
    page.key_values([
        ("permutation entropy (bits)", f"{_fmt(pe.bits)}  [{_fmt(pe.low)}, {_fmt(pe.high)}]"),
        ("normalized", f"{_fmt(pe.normalized)}  [{_fmt(pe.normalized_low)}, {_fmt(pe.normalized_high)}]"),
        ("next pattern given the current one (bits per step)", _fmt(pe.conditional_bits)),
        ("patterns seen", f"{pe.distinct} of {pe.possible} ({pe.patterns} patterns)"),
        ("never seen", f"{fb['count']}; {fb['expected_missing_if_uniform']:.3g} expected by chance if all were equally likely"),
        ("never seen, listed", " ".join(fb["patterns"]) if fb["patterns"] else "–"),
        ("interval", pe.interval),
    ])
    h, rows = permutation_table(result)
    page.table(h, rows, caption="Permutation entropy of the sub-patterns of order k")
    if pe.notes:
        page.note("Ordinal-pattern notes", list(pe.notes))


def entropy_rows_table(result: ProfileResult) -> tuple[list[str], list[list]]:
    header = ["n", "distinct words", "possible words", "occurrences", "H_n plug-in", "H_n Miller–Madow", "H_n Grassberger",
              "H_n − H_(n−1) plug-in", "H_n − H_(n−1) Grassberger", "H_n/n Grassberger", "reliable"]
    rows = [
        [r["depth"], r["distinct"], r["possible"], r["occurrences"], r["H_plugin"], r["H_miller-madow"], r["H_grassberger"],
         r["difference_plugin"], r["difference_grassberger"], r["ratio_grassberger"], r["reliable"]]
        for r in result.entropy_rows
    ]
    return header, rows


def consistency_table_rows(result: ProfileResult) -> tuple[list[str], list[list]]:
    header = ["q", "D_q log2(1/k) (bits)", "low", "high", "h_q (bits/symbol)", "low", "high", "difference", "verdict", "flags"]
    rows = [
        [r["q"], r["dimension_bits"], r["dimension_bits_low"], r["dimension_bits_high"], r["entropy_bits"],
         r["entropy_bits_low"], r["entropy_bits_high"], r["difference_bits"], r["verdict"], "; ".join(r["flags"])]
        for r in result.consistency_rows()
    ]
    return header, rows


def absent_table(result: ProfileResult) -> tuple[list[str], list[list]]:
    header = ["word", "expected count", "chance of absence (clumped Poisson)", "chance (plain Poisson)", "period", "minimal"]
    a = result.absent_dict()
    rows = [] if a is None else [
        [w["word"], w["expected"], w["p_absent"], w["p_absent_poisson"], w["period"], w["minimal"]] for w in a["words"]
    ]
    return header, rows


def _csv_header(header: list[str]) -> list[str]:
    return [re.sub(r"[^a-z0-9]+", "_", h.lower().replace("−", "-")).strip("_") for h in header]


# -------------------------------------------------------------------- page
def profile_page(result: ProfileResult, pngs: dict[str, bytes], caution: str, files: Sequence[str] = ()) -> HtmlReport:
    """The HTML page of one profile, with ``caution`` shown at its top."""
    a = result.alphabet
    page = HtmlReport(
        f"Complexity profile of {result.name}",
        subtitle=f"{result.length} symbols in {result.segments} segment(s) · alphabet {a.name} ({a.size} symbols) · "
        f"contraction ratio k = {result.ratio:g}",
        caution=caution,
    )
    page.section("Summary")
    rates = result.rate_dict()
    kv: list[tuple[str, object]] = [
        ("source", result.name),
        ("length (symbols)", result.length),
        ("segments", result.segments),
        ("alphabet", f"{a.name}: {' '.join(a.symbols) if a.size <= 32 else str(a.size) + ' symbols'}"),
        ("encoding", f"k = {result.ratio:g}; {result.overlap.reason}"),
    ]
    for d in result.dimension_rows():
        kv.append((f"D_{d['q']:g}", f"{_fmt(d['estimate'])}  [{_fmt(d['low'])}, {_fmt(d['high'])}]"))
    g = rates.get("grassberger")
    if g:
        kv.append(("entropy rate (Grassberger, bits/symbol)", f"{_fmt(g['estimate'])}  [{_fmt(g['low'])}, {_fmt(g['high'])}]"))
    if result.rate_choice is not None:
        c = result.rate_choice
        kv.append(("entropy rate to use (bits/symbol)", f"{_fmt(c.estimate)}: {c.reason}"))
    if result.permutation is not None:
        pe = result.permutation
        kv.append((f"permutation entropy, order {pe.order} (normalized)", f"{_fmt(pe.normalized)}  [{_fmt(pe.normalized_low)}, {_fmt(pe.normalized_high)}]"))
    for key, label in (("lz76", "Lempel–Ziv 1976 (bits/symbol)"), ("online_predictor", "online predictor code length (bits/symbol, upper bound)"),
                       ("compressors", "compressor bound (bits/symbol, upper bound)")):
        if key in rates:
            kv.append((label, _fmt(rates[key]["estimate"])))
    kv.append(("topological entropy (bits/symbol)", _fmt(result.topological.estimate)))
    kv.append(("consistency verdicts", "; ".join(f"q = {r['q']:g}: {r['verdict']}" for r in result.consistency_rows())))
    page.key_values(kv)
    if result.notes:
        page.note("Reliability notes", list(result.notes))

    if "encoding.png" in pngs:
        page.section("Encoding")
        side = result.settings.get("image_pixels")
        page.figure(
            pngs["encoding.png"],
            f"Points of the contractive encoding of {result.name} (ratio k = {result.ratio:g}); each symbol pulls the "
            f"point toward its corner. Pixels: {side} per side, colour = points per pixel on a log scale.",
            alt=f"Density image of the encoding of {result.name}",
        )

    page.section("Dimensions")
    page.paragraph(
        "Rényi dimensions D_q from the word counts: for non-overlapping maps the boxes of side k^n are the n-words, "
        "so D_q is the slope of the Rényi block entropy H_q against n ln(1/k) over the scaling range (weighted least "
        "squares over the linear run of depths). Intervals are block-bootstrap percentile intervals."
    )
    h, rows = dimension_table(result)
    page.table(h, rows, caption=f"D_q with {result.level:.0%} intervals")
    page.figure(pngs["spectrum.png"], f"D_q of {result.name} against q with the {result.level:.0%} interval band; "
                "negative q weights the rarest boxes and is unreliable on finite data.", alt="Dimension spectrum")
    page.figure(pngs["scaling.png"], "Log–log scaling: filled points are the fitted range (shaded), open points are "
                "outside it; the thick line has the fitted slope D_q.", alt="Scaling plots")

    page.section("Singularity spectrum f(α)")
    page.figure(pngs["falpha.png"], "f(α) by the direct method of Chhabra and Jensen, one point per q.", alt="f(alpha) spectrum")
    h, rows = spectrum_table(result)
    page.table(h, rows, caption="D_q and f(α) on the grid of orders")

    page.section("Entropy")
    page.paragraph(
        "Entropy-rate estimates in bits per symbol. The block-entropy differences are read at the deepest n the counts "
        "support (the words of length n + 1 that occur are seen at least 20 times on average); LZ76 is parsed on a "
        "prefix; the compressor bound and the online predictor's code length are upper bounds on the information "
        "content. 'within bounds' says whether an estimate lies between 0 and the smallest upper bound computed here."
    )
    h, rows = rate_table(result)
    page.table(h, rows, caption="Entropy-rate estimates and bounds")
    page.figure(pngs["entropies.png"], f"Entropy-rate estimates of {result.name} against block length; shaded block "
                "lengths are undersampled.", alt="Entropy estimates by block length")
    h, rows = entropy_rows_table(result)
    page.table(h, rows, caption="Block entropies H_n (bits) by block length n")
    page.table(
        ["q", "h_q (bits/symbol)", "block length n", "reliable", "note"],
        [[r.q, r.estimate, r.depth, r.reliable, r.note] for r in result.renyi],
        caption="Rényi entropy rates",
    )
    topo = result.topological
    kv = [("topological entropy, word growth (bits/symbol)", topo.estimate), ("at word length", topo.depth),
          ("note", topo.note or "–")]
    if result.koslicki is not None:
        kv.append(("Koslicki finite-length topological entropy (fraction of log2 A)", result.koslicki.fraction_of_max))
    page.key_values(kv)

    _permutation_section(page, result)

    page.section("Consistency")
    page.paragraph(
        "Geometry against information: box counting of the float point cloud on grids of side k^m gives D_q, shown in "
        "bits as D_q log2(1/k); the word statistics give the Rényi entropy rate h_q. For non-overlapping maps theory says "
        "they agree; 'inconsistent' (intervals do not overlap) points to a broken premise: overlapping or misaligned "
        "maps, or a stream too non-stationary for the estimators' ranges."
    )
    h, rows = consistency_table_rows(result)
    page.table(h, rows, caption="Consistency table")

    page.section("Absent words")
    ad = result.absent_dict()
    if ad is None:
        page.paragraph("Absent words were not computed; see the reliability notes.")
    else:
        page.key_values([
            ("word length", ad["depth"]), ("model order", ad["model_order"]), ("possible words", ad["possible"]),
            ("words seen", ad["distinct"]), ("words never seen", ad["absent_total"]),
            (f"examined (expected ≥ {ad['min_expected']:g} times)", ad["examined"]),
            ("examined and absent", ad["absent_examined"]), ("note", ad["note"]),
        ])
        h, rows = absent_table(result)
        if rows:
            page.table(h, rows, caption="Absent words, most expected first")
        else:
            page.paragraph("No word expected at least that often under the model is absent.")

    page.section("Input")
    rd = result.read
    kv = [(k, rd[k]) for k in ("format", "compression", "symbols", "segments", "dropped_total", "records_total") if k in rd]
    for reason, count in sorted(rd.get("dropped", {}).items()):
        kv.append((f"dropped: {reason}", count))
    page.key_values(kv)
    recs = rd.get("records", [])
    if recs:
        page.table(["record", "start", "length"], [[r.get("name"), r.get("start"), r.get("length")] for r in recs],
                   caption=f"Records ({rd.get('records_total', len(recs))} in all)")
    templates = rd.get("templates") or []
    if templates:
        top = sorted(templates, key=lambda r: (-int(r["count"]), int(r["first_line"])))[:TOP_TEMPLATES]
        page.table(["count", "first line", "template", "example"],
                   [[int(r["count"]), int(r["first_line"]), str(r["template"]), str(r.get("example", ""))] for r in top],
                   caption=f"Most frequent event templates ({len(top)} of {len(templates):,}; all are in profile.json)")
    if rd.get("notes"):
        page.note("Reader notes", [str(n) for n in rd["notes"]])
    page.key_values([("bootstrap replicates", result.n_boot), ("seed", result.seed), ("confidence level", result.level),
                     ("deepest word length counted", result.depth)])
    if files:
        page.section("Files")
        page.bullets([Link(f, f) for f in files])
    return page


# ------------------------------------------------------------------ writers
def write_profile_report(result: ProfileResult, folder: str | Path, document: dict, caution: str,
                         force: bool = False) -> list[Path]:
    """Write the folder of one profile (see the module docstring); returns the paths written.

    Parameters
    ----------
    result:
        The profile (:class:`fractalseq.jobs._profile.ProfileResult`).
    folder:
        Folder to create (``force`` to reuse an existing one).
    document:
        The JSON document written as ``profile.json`` (the profile contract of this one source).
    caution:
        The caution shown at the top of the page.
    """
    folder = prepare_folder(folder, force)
    written: list[Path] = []
    written.append(write_json(folder / "profile.json", document, force=force))
    tables = {
        "dimensions.csv": dimension_table(result),
        "spectrum.csv": spectrum_table(result),
        "rates.csv": rate_table(result),
        "entropies.csv": entropy_rows_table(result),
        "consistency.csv": consistency_table_rows(result),
        "absent_words.csv": absent_table(result),
    }
    if result.permutation is not None:
        tables["permutation.csv"] = permutation_table(result)
    for fname, (header, rows) in tables.items():
        written.append(write_csv(folder / fname, _csv_header(header), rows, force=force))
    pngs = profile_figures(result)
    for fname, data in pngs.items():
        written.append(write_bytes(folder / fname, data, force=force))
    files = ["profile.json", *tables.keys(), *pngs.keys()]
    page = profile_page(result, pngs, caution, files)
    written.append(page.write(folder / "index.html", force=force))
    return written


def write_profile_index(results: Sequence[ProfileResult], subfolders: Sequence[str], folder: str | Path,
                        document: dict, caution: str, force: bool = False) -> list[Path]:
    """Top-level ``index.html`` and ``profile.json`` over several profiles (each in its subfolder).

    ``document`` is the JSON document of all the profiles, ``caution`` the text shown at the top of the page.
    """
    folder = Path(folder)
    written = [write_json(folder / "profile.json", document, force=force)]
    page = HtmlReport(
        "Complexity profiles",
        subtitle=f"{len(results)} source(s)",
        caution=caution,
    )
    page.section("Sources")
    qs = sorted({q for r in results for q in r.qs})
    header = ["source", "length", "alphabet"] + [f"D_{q:g}" for q in qs] + ["entropy rate (bits/symbol)", "consistency"]
    rows = []
    for r, sub in zip(results, subfolders):
        dims = {d["q"]: d["estimate"] for d in r.dimension_rows()}
        g = r.rate_dict().get("grassberger", {})
        verdicts = ", ".join(sorted({c["verdict"] for c in r.consistency_rows()}))
        rows.append([Link(r.name, f"{sub}/index.html"), r.length, r.alphabet.name] + [dims.get(q) for q in qs]
                    + [g.get("estimate"), verdicts])
    page.table(header, rows, caption="One row per source; click a name for its full profile")
    page.paragraph("All numbers of every source are in profile.json next to this page (the documented JSON contract).")
    written.append(page.write(folder / "index.html", force=force))
    return written
