"""Event novelty test: p-value tools against scipy and hand-worked examples, real logs, the drift command's JSON.

Real logs are in reference/logs/ (provenance in reference/logs/README.md: a Debian 12 machine's dpkg.log and
apt term.log, a jtreg test log shipped by openjdk-17, fail2ban's test fixtures). Drift reports on logs are no
security guarantee.
"""

from __future__ import annotations

import json
import subprocess

import numpy as np
import pytest
from scipy.stats import binomtest

from _paths import CLI, LOGS
from fractalseq.compare._novelty import EventBatch, NoveltyOptions, dispersion_index, leave_blocks_out, novelty_test
from fractalseq.compare._pvalues import (
    benjamini_hochberg,
    binomial_greater,
    binomial_greater_scaled,
    binomial_less_scaled,
    binomial_two_sided,
    holm,
)
from fractalseq.errors import ParameterError
from fractalseq.jobs._events import novelty_files
from fractalseq.jobs._sources import SourceSpec


# ------------------------------------------------------------ p-value tools
@pytest.mark.parametrize("n,p", [(1, 0.5), (7, 0.3), (25, 0.5326), (60, 0.05), (200, 0.9)])
def test_binomial_tails_equal_scipy_binomtest(n, p):
    # reference: scipy.stats.binomtest (exact binomial test; two-sided = outcomes no more likely than k)
    for k in range(n + 1):
        assert binomial_greater(k, n, p) == pytest.approx(binomtest(k, n, p, alternative="greater").pvalue, rel=1e-9, abs=1e-300)
        assert binomial_two_sided(k, n, p) == pytest.approx(binomtest(k, n, p).pvalue, rel=1e-9, abs=1e-300)


def test_scaled_binomial_tail_is_the_exact_tail_at_whole_numbers_and_monotone_between():
    # I_p(k, N - k + 1) = P(Binomial(N, p) >= k) (Abramowitz & Stegun 26.5.24, from memory); checked against scipy
    for n, p in ((12, 0.4), (40, 0.5326)):
        for k in range(1, n + 1):
            assert binomial_greater_scaled(k, n, p) == pytest.approx(binomtest(k, n, p, alternative="greater").pvalue, rel=1e-9)
            assert binomial_less_scaled(k, n, p) == pytest.approx(binomtest(k, n, p, alternative="less").pvalue, rel=1e-9)
    between = [binomial_greater_scaled(x, 20.5, 0.5) for x in np.linspace(9.0, 11.0, 9)]
    assert all(a > b for a, b in zip(between, between[1:]))


def test_benjamini_hochberg_hand_example_and_plain_reference():
    # hand-worked (Benjamini & Hochberg 1995, JRSS B 57:289, step-up rule q_(i) = min_{j>=i} m p_(j) / j):
    # sorted p 0.005, 0.01, 0.03, 0.04, 0.5 -> m p / rank 0.025, 0.025, 0.05, 0.05, 0.5 -> already monotone
    p = [0.01, 0.04, 0.03, 0.005, 0.5]
    np.testing.assert_allclose(benjamini_hochberg(p), [0.025, 0.05, 0.05, 0.025, 0.5])
    # a case where the running minimum matters: sorted 0.01, 0.04, 0.041 -> 0.03, 0.06, 0.041 -> 0.03, 0.041, 0.041
    np.testing.assert_allclose(benjamini_hochberg([0.041, 0.01, 0.04]), [0.041, 0.03, 0.041])

    def plain(ps):  # the definition, written out with loops
        m = len(ps)
        order = sorted(range(m), key=lambda i: ps[i])
        out = [0.0] * m
        for r, i in enumerate(order, start=1):
            out[i] = min(1.0, min(ps[order[j - 1]] * m / j for j in range(r, m + 1)))
        return out

    rng = np.random.default_rng(4)
    for _ in range(20):
        ps = list(rng.uniform(0, 0.2, size=int(rng.integers(1, 15))))
        np.testing.assert_allclose(benjamini_hochberg(ps), plain(ps), rtol=1e-12)


def test_holm_hand_example():
    # Holm 1979 step-down: sorted 0.005, 0.01, 0.03, 0.04 times 4, 3, 2, 1 -> 0.02, 0.03, 0.06, 0.04 -> running max
    np.testing.assert_allclose(holm([0.01, 0.04, 0.03, 0.005]), [0.03, 0.06, 0.06, 0.02])


def test_leave_blocks_out_counts_templates_confined_to_one_block():
    # blocks of 3 lines: [0 1 2] [0 3 3] [4 0 0], remainder [1]; template 1 is in block 0 and the remainder,
    # 2 only in block 0, 3 only in block 1, 4 only in block 2 -> D = 3 (worked by hand)
    ids = np.array([0, 1, 2, 0, 3, 3, 4, 0, 0, 1])
    assert leave_blocks_out(ids, 3) == (3, 3)
    # with blocks of 1 line the count is the Good-Turing number of singletons N_1 (Good 1953, from memory)
    counts = np.bincount(ids)
    assert leave_blocks_out(ids, 1) == (ids.size, int(np.count_nonzero(counts == 1)))


def test_dispersion_index_is_pearson_chi2_over_degrees_of_freedom():
    # blocks of 4 lines, 5 blocks; template 1 counts per block 0, 4, 0, 0, 1 (c = 5): Pearson X^2 against equal
    # counts 1 per block = (1 + 9 + 1 + 1 + 0) / 1 = 12, phi = 12 / 4 = 3 (worked by hand);
    # template 0 fills the rest: counts 4, 0, 4, 4, 3 -> e = 3, X^2 = (1 + 9 + 1 + 1 + 0) / 3 = 4, phi = max(1, 1) = 1
    ids = np.array([0, 0, 0, 0, 1, 1, 1, 1, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 0, 1])
    phi, J = dispersion_index(ids, 3, 4)
    assert J == 5
    np.testing.assert_allclose(phi, [1.0, 3.0, 1.0])
    from scipy.stats import chisquare  # reference: scipy's Pearson statistic

    assert chisquare([0, 4, 0, 0, 1]).statistic / 4 == pytest.approx(phi[1])


def test_vanished_and_new_event_p_values_are_the_exact_binomial_tails():
    # invented: template 2 has 12 lines spread evenly over the baseline (800 lines), none in the new batch (400 lines);
    # spread evenly its dispersion index is 1, so the test is the exact binomial one
    rng = np.random.default_rng(1)
    base = rng.integers(0, 2, 800)
    base[np.arange(12) * 66 + 7] = 2
    assert dispersion_index(base, 3, 80)[0][2] == 1.0
    new = rng.integers(0, 2, 400)
    res = novelty_test(EventBatch(base), EventBatch(new), ["a", "b", "c"])
    (gone,) = res.vanished_events
    pi = 400 / 1200
    assert gone.template == "c" and gone.baseline_count == 12
    assert gone.p_value == pytest.approx(binomtest(0, 12, pi, alternative="less").pvalue, rel=1e-12)
    fam = {f.family: f for f in res.families}
    assert fam["vanished_events"].p_value == pytest.approx(fam["vanished_events"].tested * gone.p_value)
    # new_events: no new template -> p = 1 exactly
    assert fam["new_events"].statistic == 0 and fam["new_events"].p_value == 1.0


def test_burst_of_a_known_template_is_found_and_located():
    # invented: 20 templates drawn independently; in the new batch template 5 (rate 1/40) fills lines 1001-1040
    rng = np.random.default_rng(7)
    probs = np.r_[np.full(19, 0.975 / 19), 0.025]
    probs = probs[[*range(5), 19, *range(5, 19)]]
    base = rng.choice(20, size=3000, p=probs)
    new = rng.choice(20, size=3000, p=probs)
    quiet = novelty_test(EventBatch(base), EventBatch(new), [f"t{i}" for i in range(20)])
    assert not quiet.changed
    new[1000:1040] = 5
    res = novelty_test(EventBatch(base), EventBatch(new), [f"t{i}" for i in range(20)])
    fam = {f.family: f for f in res.families}
    assert fam["bursts"].p_value < 1e-6
    burst = res.bursts[0]
    assert burst.template == "t5" and burst.count >= 40 and 950 < burst.first_line <= 1001 and burst.last_line >= 1040


def test_bad_options_and_ids_are_refused():
    with pytest.raises(ParameterError):
        NoveltyOptions(blocks=1).check()
    with pytest.raises(ParameterError):
        novelty_test(EventBatch([0, 1]), EventBatch([0, 3]), ["a", "b"])


# ---------------------------------------------------------------- real logs
def _nonblank(name: str) -> list[str]:
    return [ln for ln in (LOGS / name).read_text(encoding="utf-8", errors="replace").split("\n") if ln.strip()]


def _split(tmp_path, name, insert=None, block=100):
    """Interleaved blocks of ``block`` lines: even blocks to the baseline, odd blocks to the new batch."""
    lines = _nonblank(name)
    a = [ln for i, ln in enumerate(lines) if (i // block) % 2 == 0]
    b = [ln for i, ln in enumerate(lines) if (i // block) % 2 == 1]
    at = None
    if insert is not None:
        at = len(b) // 2
        b = b[:at] + insert + b[at:]
    (tmp_path / "base.log").write_text("\n".join(a) + "\n", encoding="utf-8")
    (tmp_path / "new.log").write_text("\n".join(b) + "\n", encoding="utf-8")
    return [SourceSpec(str(tmp_path / "base.log"), "base.log")], [SourceSpec(str(tmp_path / "new.log"), "new.log")], at


@pytest.mark.parametrize("block", [50, 100])
@pytest.mark.parametrize("name", ["dpkg-excerpt.log", "apt-term-excerpt.log", "jtreg-output-excerpt.log"])
def test_interleaved_halves_of_one_real_log_show_no_change(tmp_path, name, block):
    base, new, _ = _split(tmp_path, name, block=block)
    res = novelty_files(base, new)
    assert not res.changed, res.verdict
    assert res.p_value >= 0.05


@pytest.mark.parametrize("other", ["fail2ban-postfix.log", "fail2ban-sshd.log"])
def test_another_service_inserted_into_a_package_log_is_listed_as_new_events(tmp_path, other):
    inserted = _nonblank(other)[:150]  # postfix: all its 133 non-blank lines; sshd: its first 150
    base, new, at = _split(tmp_path, "dpkg-excerpt.log", insert=inserted)
    res = novelty_files(base, new)
    assert res.changed
    fam = {f.family: f for f in res.families}
    assert fam["new_events"].p_adjusted < 1e-6
    # every line of the inserted service is new (its templates share nothing with dpkg's), and nothing else is
    assert res.novel_lines == len(inserted)
    for e in res.new_events:
        assert at < e.first_line <= at + len(inserted)
        assert e.example in inserted
    twice = novelty_files(base, new)
    assert json.dumps(twice.to_dict(), sort_keys=True) == json.dumps(res.to_dict(), sort_keys=True)


def test_a_test_log_inserted_into_a_package_log_is_one_new_event_with_a_changed_rate(tmp_path):
    # 150 lines of jtreg output, nearly all "Passed: <test>": one new template, so the evidence is its rate
    inserted = _nonblank("jtreg-output-excerpt.log")[:150]
    base, new, at = _split(tmp_path, "dpkg-excerpt.log", insert=inserted)
    res = novelty_files(base, new)
    assert res.changed
    top = res.new_events[0]
    assert top.template.startswith("Passed:") and top.lines == sum(ln.startswith("Passed:") for ln in inserted)
    assert at < top.first_line <= at + len(inserted)
    assert any(c.template == top.template and c.direction == "more in new" for c in res.rate_changes)


@pytest.mark.parametrize("pair", [("dpkg-excerpt.log", "apt-term-excerpt.log"), ("jtreg-output-excerpt.log", "fail2ban-sshd.log")])
def test_two_services_sharing_no_template_are_changed(pair):
    res = novelty_files(*([SourceSpec(str(LOGS / p), p)] for p in pair))
    assert res.changed and res.p_value < 1e-6
    assert res.new_templates > 10


# ----------------------------------------------------------------- command
def test_drift_json_has_a_novelty_key_and_the_terminal_text_is_escaped(tmp_path):
    inserted = _nonblank("fail2ban-postfix.log")[:150]
    inserted += ["[bold red]forged markup[/] from \x1b[31mterminal escape"] * 3
    _split(tmp_path, "dpkg-excerpt.log", insert=inserted)
    args = [str(tmp_path / "base.log"), str(tmp_path / "new.log"), "--format", "log", "-q", "-R", "99"]
    proc = subprocess.run(CLI + ["drift", *args, "--json"], capture_output=True, text=True)
    assert proc.returncode == 1, proc.stderr
    data = json.loads(proc.stdout)
    assert data["novelty"]["changed"] is True and data["novelty"]["new_templates"] > 10
    assert "tests" in data and "verdict" in data  # the drift document keeps its keys
    text = subprocess.run(CLI + ["drift", *args], capture_output=True, text=True)
    assert text.returncode == 1
    out = text.stdout
    for section in ("new events:", "vanished events:", "rate changes:"):
        assert section in out
    assert "\x1b" not in out
    assert "[bold red]forged markup[/]" in out  # shown as text, not interpreted
