"""The demo: the whole job on the invented scenario, every estimate beside its true value.

:func:`run_demo` writes the scenario's data (:mod:`fractalseq.datasets._scenario`), then runs
the survey of the simulated samples, the drift test between the two relay-log
batches, a scan of the sample with the inserted repeat island, the online
predictor on the logs and a model of week 1 scoring week 2, and writes one report folder with an index page.  The
summary rows put each estimate, with its interval, beside the known truth.
"""

from __future__ import annotations

import lzma
import time
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Callable

from fractalseq.datasets import _scenario as scen
from fractalseq.io._outputs import StagedFolder, to_json, write_json, write_text

CAUTION = (
    "Invented data. Genomic output of fractalseq is for research, not for clinical decisions; drift "
    "reports on logs are no security guarantee."
)


@dataclass(frozen=True)
class SummaryRow:
    """One line of the demo summary: an estimate with its interval beside the truth."""

    subject: str
    figure: str
    estimate: float | str
    low: float | None
    high: float | None
    truth: float | str
    within: bool | None  # truth inside [low, high] (None when there is no interval)

    def to_dict(self) -> dict:
        return {
            "subject": self.subject,
            "figure": self.figure,
            "estimate": self.estimate,
            "low": self.low,
            "high": self.high,
            "truth": self.truth,
            "within": self.within,
        }


@dataclass(frozen=True)
class DemoResult:
    """What the demo computed: the scenario, the summary rows and the files written."""

    scenario: scen.Scenario
    rows: tuple[SummaryRow, ...]
    files: tuple[str, ...]
    seconds: float
    notes: tuple[str, ...] = field(default=())

    def to_dict(self) -> dict:
        return {
            "note": scen.SCENARIO_NOTE,
            "caution": CAUTION,
            "scenario": self.scenario.to_dict(),
            "summary": [r.to_dict() for r in self.rows],
            "files": list(self.files),
            "notes": list(self.notes),
        }


def _triple(d: dict | None) -> tuple[float | None, float | None, float | None]:
    if not d:
        return None, None, None
    return d.get("estimate"), d.get("low"), d.get("high")


def _row(subject: str, figure: str, triple, truth: float) -> SummaryRow:
    est, lo, hi = triple
    within = None if lo is None or hi is None else bool(lo <= truth <= hi)
    return SummaryRow(subject, figure, est if est is not None else float("nan"), lo, hi, float(truth), within)


def run_demo(
    folder: str | Path,
    seed: int = 7,
    length: int = 120_000,
    log_lines: int = 6_000,
    workers: int = 1,
    force: bool = False,
    step: Callable[[str], None] | None = None,
) -> DemoResult:
    """Generate the scenario into ``folder``, analyse it, and write the reports.

    Parameters
    ----------
    folder:
        Report folder (created; must be empty unless ``force``).
    seed:
        Seed of the scenario and of every random step; same seed, same JSON bytes.
    length, log_lines:
        Size of each simulated sample and of each log batch.
    workers:
        Local worker processes for the survey (1 runs serially).
    step:
        Called with a short description before each stage (progress display).
    """
    from fractalseq.jobs._inputs import check_seed

    seed = check_seed(seed)  # before the warm-up process or any folder
    length, log_lines = scen.check_size(length, log_lines)
    t0 = time.perf_counter()
    say = step or (lambda s: None)
    # On a first run the numba kernels are compiled before they are cached; the predictor's are the
    # largest, so a second process compiles them while this one surveys (they are loaded from the cache
    # when the predictor steps come).  Once cached, this costs a process start on the other core.
    stage = StagedFolder(folder, force)  # built under a hidden sibling, renamed into place at the end
    warm = None
    try:
        warm = _start_predictor_warmup()
        result = _run_in(stage.path, Path(folder), seed, length, log_lines, workers, force, say, warm, t0)
        stage.commit()
    except BaseException:
        _stop_warmup(warm)  # an interrupted or failed demo leaves no process behind
        stage.discard()
        raise
    return result


def _run_in(out: Path, final: Path, seed: int, length: int, log_lines: int, workers: int, force: bool,
            say: Callable[[str], None], warm, t0: float) -> DemoResult:
    """The demo's work, written into ``out`` (the staged folder); paths are recorded as under ``final``."""
    from fractalseq.compare._drift import DriftOptions, drift_test
    from fractalseq.report.drift import write_outputs as write_drift
    from fractalseq.jobs._engines import make_engine
    from fractalseq.predict._predictor import online_code_length
    from fractalseq.compare._scan import scan_stream
    from fractalseq.report.scan import write_outputs as write_scan
    from fractalseq.sources import open_source
    from fractalseq.jobs._survey import SurveyOptions, expand_inputs, run_survey
    from fractalseq.jobs._survey import write_outputs as write_survey

    staged = str(out)

    def shown(path: str | Path) -> str:
        """A path in the staged folder as it will be named once the folder is in place."""
        text = str(path)
        return str(final) + text[len(staged):] if text.startswith(staged) else text

    say("simulating the invented scenario")
    sc = scen.generate(out / "data", seed=seed, length=length, log_lines=log_lines, force=force)
    files: list[Path] = []
    rows: list[SummaryRow] = []
    notes: list[str] = []

    # 1. survey of the samples (profile of each, distances, clustering)
    say("surveying the samples")
    specs = expand_inputs([s.path for s in sc.sources])
    engine = make_engine("processes" if workers > 1 else "serial", workers=workers)
    try:
        survey = run_survey(specs, SurveyOptions(seed=seed), engine=engine)
    finally:
        close = getattr(engine, "close", None)
        if close:
            close()
    survey = replace(survey, sources=tuple({**e, "path": shown(e["path"])} for e in survey.sources))
    files += write_survey(survey, out / "survey", force=force)
    by_name = {r["name"]: r for r in survey.to_dict()["sources"]}
    for truth in sc.sources:
        r = by_name[Path(truth.path).name] if Path(truth.path).name in by_name else by_name[truth.name]
        if truth.island is None:
            rates = r.get("entropy_rate_bits", {})
            key = next((k for k in ("grassberger", "miller-madow", "plugin") if k in rates), None)
            if key:
                rows.append(_row(truth.name, f"h ({key}), bits", _triple(rates[key]), truth.entropy_rate_bits))
            for q, label in ((1.0, "D1"), (2.0, "D2")):
                rows.append(_row(truth.name, f"{label} (k = 1/2)", _triple(r.get(label)), truth.dimension(q)))
        pred = _triple(r.get("predictor_bits_per_symbol"))
        if pred[0] is not None and truth.island is None:
            # the online code length is an upper bound: report it against the true rate
            rows.append(
                SummaryRow(truth.name, "predictor bits (≥ h)", pred[0], None, None,
                           truth.entropy_rate_bits, None)
            )

    # 2. scan of the sample with the repeat island
    say("scanning the island sample")
    island = next(s for s in sc.sources if s.island is not None)
    arr = open_source(island.path, name=shown(island.path)).to_array()
    window = max(1000, length // 60)
    scan = scan_stream(arr, window=window, seed=seed)
    files += write_scan(scan, out / "scan", force=force)
    low = [iv for iv in scan.to_dict().get("low_complexity", [])] or [
        iv for iv in scan.to_dict().get("intervals", []) if iv.get("low_complexity")
    ]
    a, b = island.island
    if low:
        best = min(low, key=lambda iv: abs(iv["start"] - a) + abs(iv["end"] - b))
        found = f"{best['start']:,}-{best['end']:,}"
        ok = abs(best["start"] - a) <= window and abs(best["end"] - b) <= window
    else:
        found, ok = "none found", False
    rows.append(SummaryRow(island.name, "repeat island (scan)", found, None, None, f"{a:,}-{b:,}", ok))

    # 3. drift between the two relay-log batches
    say("testing the relay logs for drift")
    base = open_source(sc.logs.baseline, fmt="log", alphabet="learn", name=shown(sc.logs.baseline)).to_array()
    new = open_source(sc.logs.new, fmt="log", alphabet="learn", name=shown(sc.logs.new)).to_array()
    drift = drift_test([base], [new], DriftOptions(seed=seed, permutations=199))
    files += write_drift(drift, out / "drift", force=force)
    dd = drift.to_dict()
    rows.append(SummaryRow("relay logs", "drift found", f"{'yes' if dd['changed'] else 'no'}, p={dd['p_value']:.2g}",
                           None, None, "yes" if sc.logs.changed else "no", dd["changed"] == sc.logs.changed))

    # 4. predictor on the log stream against lzma
    say("coding the relay log with the predictor")
    _finish_warmup(warm)
    pred = online_code_length(new)
    raw = Path(sc.logs.new).read_bytes()
    # lzma on the event codes, one byte per event (the same symbols the predictor sees)
    lz_bits = 8 * len(lzma.compress(new.codes.astype("uint8").tobytes(), preset=9 | lzma.PRESET_EXTREME)) / len(new)
    rows.append(SummaryRow("relay log wk 2", "predictor bits/event", round(pred.bits_per_symbol, 4), None, None,
                           f"lzma {lz_bits:.3f}", pred.bits_per_symbol < lz_bits))
    del raw

    # 5. a model learned on week 1 scores week 2 against week 1's templates: new templates are named
    say("scoring week 2 with a model learned on week 1")
    from fractalseq.predict._predictor import CellPredictor

    model = CellPredictor().fit(base)
    wk2 = open_source(sc.logs.new, fmt="log", alphabet=model.alphabet_, policy="break")
    scored = model.evaluate(wk2)
    unseen = [e["template"] for e in wk2.report.extra.get("unlisted_templates", [])]
    rows.append(SummaryRow("relay log wk 2", "bits/event, model of wk 1", round(scored.bits_per_symbol, 4), None, None,
                           f"online {pred.bits_per_symbol:.3f}", None))
    # the scenario's new event kinds (their templates written by hand from the formats) against the
    # templates the model did not know
    truth_templates = set(sc.logs.new_templates)
    found = set(unseen)
    rows.append(SummaryRow("relay log wk 2", "new event kinds named", f"{len(unseen)}", None, None,
                           f"{len(sc.logs.new_templates)}", found == truth_templates))
    notes.extend(f"week 2 event kind the week-1 model never saw: {t}" for t in unseen)

    seconds = time.perf_counter() - t0
    sc = replace(
        sc, folder=shown(sc.folder), sources=tuple(replace(s, path=shown(s.path)) for s in sc.sources),
        logs=replace(sc.logs, baseline=shown(sc.logs.baseline), new=shown(sc.logs.new)),
    )
    result = DemoResult(sc, tuple(rows), tuple(shown(p) for p in files), seconds, tuple(notes))
    say("writing the index")
    files.append(write_json(out / "demo.json", result.to_dict(), force=force))
    files.append(write_text(out / "index.html", index_page(result, final).render(), force=force))
    return DemoResult(sc, tuple(rows), tuple(shown(p) for p in files), seconds, tuple(notes))


def warm_predictor() -> None:  # pragma: no cover - runs in the warm-up process
    """Compile (and cache) the predictor kernels the demo uses, on a few invented symbols."""
    import numpy as np

    from fractalseq.runner import pause_point

    pause_point("demo.warmup", 1)  # lets a test interrupt the demo while this process still runs

    from fractalseq import alphabet as al
    from fractalseq.predict._predictor import CellPredictor, online_code_length
    from fractalseq.stream import from_codes

    rng = np.random.default_rng(0)
    dna = from_codes(al.dna(), rng.integers(0, 4, 3000))
    events = from_codes(al.from_symbols([f"event {i}" for i in range(12)], name="templates"), rng.integers(0, 12, 3000))
    for arr in (dna, events):
        online_code_length(arr)
    CellPredictor().fit(events).evaluate(events)


def _start_predictor_warmup():
    """Start :func:`warm_predictor` in a silent child interpreter (``None`` if no process can be started)."""
    import subprocess
    import sys

    try:
        return subprocess.Popen(
            [sys.executable, "-c", "from fractalseq.demo import warm_predictor; warm_predictor()"],
            stdin=subprocess.DEVNULL, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
        )
    except OSError:  # no process to spare: the predictor steps compile for themselves
        return None


def _stop_warmup(proc) -> None:
    """End the warm-up process now (the demo was interrupted or failed); it holds nothing worth keeping."""
    if proc is None or proc.poll() is not None:
        return
    proc.terminate()
    try:
        proc.wait(timeout=5)
    except Exception:  # noqa: BLE001 - a process that ignores the request is killed
        proc.kill()
        proc.wait()


def _finish_warmup(proc) -> None:
    if proc is not None:
        try:
            proc.wait(timeout=300)
        except Exception:  # noqa: BLE001 - a stuck warm-up only costs the compile it would have saved
            proc.kill()
            proc.wait()


def index_page(result: DemoResult, folder: Path):
    """The demo's front page: the scenario, the summary table and links to every report."""
    from fractalseq.report.html import HtmlReport, Link

    page = HtmlReport("fractalseq demo: the Kelpwater Marine Station", subtitle=scen.SCENARIO_NOTE, caution=CAUTION)
    page.section("Estimates beside the truth")
    page.paragraph(
        "Each simulated sample comes from a source whose entropy rate and Rényi dimensions are known in closed form "
        "(Cover & Thomas 2006, ch. 4; Rached, Alajaji & Campbell 2001). 'within' says whether the truth lies inside "
        "the estimate's 95% interval."
    )
    header = ["subject", "figure", "estimate", "low", "high", "truth", "within"]
    page.table(header, [[r.subject, r.figure, r.estimate, r.low, r.high, r.truth,
                         "" if r.within is None else ("yes" if r.within else "no")] for r in result.rows])
    page.section("Reports")
    page.bullets([
        Link("survey of the samples", "survey/survey.html"),
        Link("scan of the island sample", "scan/scan.html"),
        Link("drift between the relay-log batches", "drift/drift.html"),
        Link("all numbers (JSON)", "demo.json"),
    ])
    return page


def summary_json(result: DemoResult) -> str:
    """Deterministic JSON of the demo result (no timings)."""
    return to_json(result.to_dict())
