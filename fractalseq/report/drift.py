"""Reports of a drift test: the plain-text verdict, the HTML page, and the folder writer.

The numbers come from :func:`fractalseq.compare._drift.drift_test`; nothing
here computes a statistic.  Drift reports on logs are no security guarantee.
"""

from __future__ import annotations

from pathlib import Path

from fractalseq.compare._drift import CAUTION, DriftResult
from fractalseq.io._outputs import write_text
from fractalseq.report.html import HtmlReport


def drift_text(result: DriftResult) -> str:
    """Plain-text report: the verdict first, the evidence after."""
    lines = [result.verdict, ""]
    lines.append(
        f"Baseline: {result.baseline['symbols']} symbols in {result.baseline['blocks']} blocks; "
        f"new: {result.new['symbols']} symbols in {result.new['blocks']} blocks; "
        f"depth {result.depth}, blocks of {result.block}, {result.parameters.permutations} permutations, "
        f"{'Holm' if result.parameters.adjust == 'holm' else 'Benjamini-Hochberg'} adjustment."
    )
    lines.append("")
    lines.append(f"{'figure':<14}{'statistic':>12}{'baseline':>11}{'new':>11}{'effect':>12}{'p':>9}{'adjusted p':>12}")
    for t in result.tests:
        lines.append(
            f"{t.figure:<14}{t.statistic:>12.4g}{_num_text(t.baseline):>11}{_num_text(t.new):>11}{t.effect:>12.4g}{t.p_value:>9.3g}{t.p_adjusted:>12.3g}"
        )
    lines.append("")
    for t in result.tests:
        lines.append(f"  {t.figure}: {t.statistic_name}; effect = {t.effect_name}")
    if result.top_words:
        lines += ["", f"Words contributing most to the difference (depth {result.depth}):"]
        for w in result.top_words:
            lines.append(
                f"  {w['word']!s:<24} baseline {w['baseline_count']:>9} ({w['baseline_frequency']:.4f})  "
                f"new {w['new_count']:>9} ({w['new_frequency']:.4f})  {w['direction']}, {100 * w['share_of_statistic']:.1f}% of G"
            )
    if result.top_contexts:
        lines += ["", "Contexts whose next-symbol distribution changed most:"]
        for c in result.top_contexts:
            ch = c["largest_change"][0] if c["largest_change"] else None
            detail = f"  P({ch['next']}) {ch['baseline_probability']:.3f} -> {ch['new_probability']:.3f}" if ch else ""
            lines.append(f"  {c['context']!s:<24} {100 * c['share_of_statistic']:.1f}% of conditional G{detail}")
    for n in result.notes:
        lines.append(f"note: {n}")
    lines += ["", "Drift reports on logs are no security guarantee."]
    return "\n".join(lines) + "\n"


def _num_text(v) -> str:
    return "–" if v is None else f"{v + 0.0:.4g}"  # + 0.0: never "-0"


def drift_html(result: DriftResult):
    """The drift report as a self-contained HTML page."""
    page = HtmlReport("Drift test", result.verdict, caution=result.caution or CAUTION)
    page.section("Verdict")
    page.paragraph(result.verdict)
    page.key_values(
        [
            ("baseline symbols", result.baseline["symbols"]),
            ("new symbols", result.new["symbols"]),
            ("depth", result.depth),
            ("block length", result.block),
            ("permutations", result.parameters.permutations),
            ("adjustment", result.parameters.adjust),
        ]
    )
    page.section("Tests")
    page.table(
        ["figure", "statistic", "baseline", "new", "effect", "p", "adjusted p", "what"],
        [[t.figure, t.statistic, t.baseline, t.new, t.effect, t.p_value, t.p_adjusted, t.statistic_name] for t in result.tests],
    )
    if result.top_words:
        page.section("Contributing words")
        page.table(
            ["word", "baseline count", "new count", "baseline freq", "new freq", "direction", "share of G"],
            [[w["word"], w["baseline_count"], w["new_count"], w["baseline_frequency"], w["new_frequency"], w["direction"], w["share_of_statistic"]] for w in result.top_words],
        )
    if result.notes:
        page.section("Notes")
        page.note("", result.notes)
    return page


def write_outputs(result: DriftResult, folder: str | Path, force: bool = False) -> list[Path]:
    """Write drift.json, drift.txt and drift.html into ``folder`` (atomically)."""
    folder = Path(folder)
    return [
        write_text(folder / "drift.json", result.to_json(), force=force),
        write_text(folder / "drift.txt", drift_text(result), force=force),
        write_text(folder / "drift.html", drift_html(result).render(), force=force),
    ]
