"""``count`` split by address (each worker counts one slice of the words) equals the serial one-pass count.

Every worker reads all the inputs and counts only the words whose address lies in its
slice; the slices' figures are added up without a merge (``fractalseq.words._slices``).
The reference is the serial streamed count (itself checked against the standard library
in ``tests/test_words.py``): the same JSON bytes (every depth's distinct words and
occurrences, the most frequent words, the readers' reports) and, when the tables are
sent back, the same table at every depth.  Short words are also checked against a plain
``collections.Counter`` over each record cut at its ambiguous symbols (common practice:
a word never spans an ``N``).
"""

from __future__ import annotations

import collections
import os
import subprocess

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from fractalseq.alphabet import Alphabet, preset
from fractalseq.errors import InputError
from fractalseq.io._outputs import to_json
from fractalseq.jobs._engines import ProcessEngine
from fractalseq.jobs._files import count_files
from fractalseq.jobs._inputs import ReaderOptions
from fractalseq.words._counts import WordCounter, WordCounts, count_words, decode_address
from fractalseq.words._slices import AddressSlice, count_slice, join_slices, plan_slices, summarize_slice
from fractalseq.stream import SymbolArray

from _inprocess import InProcess, fasta_word_counts
from _paths import CLI, ROOT


def _fasta(rng: np.random.Generator, records: int, length: int, skew: bool) -> str:
    p = [0.55, 0.2, 0.15, 0.07, 0.03] if skew else [0.24, 0.24, 0.24, 0.24, 0.04]
    out = []
    for r in range(records):
        seq = "".join(np.array(list("ACGTN"))[rng.choice(5, int(rng.integers(1, length)), p=p)])
        out.append(f">r{r} invented\n" + "\n".join(seq[i : i + 60] for i in range(0, len(seq), 60)))
    return "\n".join(out) + "\n"


@settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(seed=st.integers(0, 10_000), records=st.integers(1, 5), depth=st.integers(1, 12), workers=st.integers(1, 9),
       top=st.integers(0, 6), skew=st.booleans(), files=st.integers(1, 3))
def test_sliced_count_equals_serial(tmp_path, seed, records, depth, workers, top, skew, files):
    rng = np.random.default_rng(seed)
    texts = [_fasta(rng, records, 3_000, skew) for _ in range(files)]
    paths = []
    for i, text in enumerate(texts):
        path = tmp_path / f"s{seed}_{i}.fa"
        path.write_text(text)
        paths.append(str(path))
    serial = count_files(paths, depth, ReaderOptions(), top=top)
    brief = count_files(paths, depth, ReaderOptions(), top=top, engine=InProcess(workers), keep_counts=False)
    assert brief.counts is None  # the tables stayed with the workers
    assert to_json(brief.to_dict()) == to_json(serial.to_dict())  # every depth, the top words, the reports: same bytes
    whole = count_files(paths, depth, ReaderOptions(), top=top, engine=InProcess(workers))
    assert to_json(whole.to_dict()) == to_json(serial.to_dict())
    assert whole.counts.storage == serial.counts.storage
    for d in range(1, depth + 1):
        for a, b in zip(serial.counts.words(d), whole.counts.words(d)):
            assert np.array_equal(a, b) and a.dtype == b.dtype
    n = min(depth, 3)
    w, c = whole.counts.words(n)
    got = {"".join("ACGT"[(int(x) >> (2 * (n - 1 - i))) & 3] for i in range(n)): int(k) for x, k in zip(w, c) if k}
    want = sum((fasta_word_counts(t, n) for t in texts), collections.Counter())
    assert got == dict(want)


@settings(max_examples=40, deadline=None)
@given(size=st.integers(1, 30), depth=st.integers(1, 12), parts=st.integers(1, 40), sampled=st.booleans(),
       seed=st.integers(0, 1000))
def test_slices_cover_every_address_once_at_prefix_cuts(size, depth, parts, sampled, seed):
    alphabet = Alphabet("invented", tuple(chr(97 + i) for i in range(size)))  # sizes that are and are not powers of 2
    depth = min(depth, alphabet.max_depth)
    rng = np.random.default_rng(seed)
    sample = rng.integers(0, alphabet.size, 5_000).astype(alphabet.code_dtype) if sampled else None
    if sampled and seed % 2:
        sample[:] = 0  # a sample of one symbol only: the slices must still tile
    plan = plan_slices(alphabet, depth, parts, sample)
    assert len(plan) == min(parts, alphabet.size**depth)  # fewer only when there are fewer words than parts
    top = (1 << (alphabet.bits * depth)) - 1
    assert plan[0].first == 0 and plan[-1].last == top
    for a, b in zip(plan, plan[1:]):
        assert b.first == a.last + 1 and a.first <= a.last
    # every cut is the address of a real word (each symbol code below A), the first one of its prefix
    for s in plan[1:]:
        codes = decode_address(s.first, depth, alphabet.bits)
        assert max(codes) < alphabet.size


def test_a_sample_balances_a_skewed_source():
    """With a sample of a source rich in A, the slices get similar shares of its words (not of the addresses)."""
    alphabet = preset("dna")
    rng = np.random.default_rng(4)
    codes = rng.choice(4, 200_000, p=[0.7, 0.1, 0.1, 0.1]).astype(np.uint8)
    starts = np.array([0], np.int64)
    total = count_words(SymbolArray(alphabet, codes, starts, "x"), 8).total(8)
    shares = []
    for where in plan_slices(alphabet, 8, 2, codes[:50_000]):
        c = WordCounter(alphabet, 8, window=(where.first, where.last))
        c.add(codes, starts, final=True)
        shares.append(c.finish().total(8) / total)
    assert abs(shares[0] - 0.5) < 0.05, shares
    even = plan_slices(alphabet, 8, 2)  # without a sample: A,C | G,T, far from even here
    c = WordCounter(alphabet, 8, window=(even[0].first, even[0].last))
    c.add(codes, starts, final=True)
    assert c.finish().total(8) / total > 0.75


def test_slices_that_do_not_tile_or_saw_different_inputs_are_refused():
    alphabet = preset("dna")
    codes = np.random.default_rng(2).integers(0, 4, 5_000).astype(np.uint8)
    starts = np.array([0], np.int64)

    def part(where, length_codes=codes):
        c = WordCounter(alphabet, 6, window=(where.first, where.last))
        c.add(length_codes, starts, final=True)
        return summarize_slice(c.finish(), where, [], 0, False)

    plan = plan_slices(alphabet, 6, 3)
    good = [part(w) for w in plan]
    assert join_slices(good).ladder() == count_words(SymbolArray(alphabet, codes, starts, "x"), 6).ladder()
    with pytest.raises(InputError, match="changed while the workers read it"):
        join_slices(good[:1] + good[2:])  # a slice missing: the addresses are not covered
    gap = AddressSlice(1, plan[1].first + 1, plan[1].last)
    with pytest.raises(InputError, match="changed while the workers read it"):
        join_slices([good[0], part(gap), good[2]])
    with pytest.raises(InputError, match="changed while the workers read it"):
        join_slices([good[0], part(plan[1], codes[:-7]), good[2]])  # one worker saw a shorter file


def test_sliced_count_on_worker_processes_with_other_alphabets(tmp_path):
    """Real worker processes (the reader's options travel pickled); a binary and a protein input."""
    rng = np.random.default_rng(11)
    binary = tmp_path / "b.txt"
    binary.write_text("".join(rng.choice(list("01"), 20_000)) + "\n")
    protein = tmp_path / "p.fa"
    protein.write_text(">p invented\n" + "".join(rng.choice(list("ACDEFGHIKLMNPQRSTVWY"), 20_000)) + "\n")
    with ProcessEngine(2) as eng:
        for path, options, depth in ((binary, ReaderOptions(fmt="text", alphabet="binary"), 20),
                                     (protein, ReaderOptions(alphabet="protein"), 5)):
            serial = count_files([str(path)], depth, options, top=3)
            split = count_files([str(path)], depth, options, top=3, engine=eng, keep_counts=False)
            assert to_json(split.to_dict()) == to_json(serial.to_dict())


def test_standard_input_and_explicit_pieces_keep_the_position_split(tmp_path, monkeypatch):
    """--piece (or an input that is not a regular file) splits by position: the slices are not used."""
    import fractalseq.words._slices as slices

    path = tmp_path / "x.fa"
    path.write_text(_fasta(np.random.default_rng(3), 2, 4_000, False))
    monkeypatch.setattr(slices, "count_slice", lambda task: pytest.fail("sliced although pieces were asked for"))
    serial = count_files([str(path)], 8, ReaderOptions())
    split = count_files([str(path)], 8, ReaderOptions(), engine=InProcess(2), piece=1_000)
    assert to_json(split.to_dict()) == to_json(serial.to_dict())


@pytest.mark.slow
def test_count_command_split_by_address_prints_and_saves_the_serial_bytes(tmp_path):
    path = tmp_path / "g.fa"
    path.write_text(_fasta(np.random.default_rng(7), 3, 40_000, True))
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    base = [*CLI, "count", str(path), "--depth", "12", "--json", "--top", "5"]
    serial = subprocess.run([*base, "--save", str(tmp_path / "a.npz")], capture_output=True, text=True, timeout=300, env=env)
    split = subprocess.run([*base, "--workers", "2", "--save", str(tmp_path / "b.npz")], capture_output=True, text=True,
                           timeout=300, env=env)
    assert serial.returncode == split.returncode == 0, split.stderr
    assert split.stdout == serial.stdout
    a, b = WordCounts.load(tmp_path / "a.npz"), WordCounts.load(tmp_path / "b.npz")
    assert a.to_arrays()[0] == b.to_arrays()[0]  # the header holds every array's sha256
    brief = subprocess.run([*base, "--workers", "2"], capture_output=True, text=True, timeout=300, env=env)
    assert brief.returncode == 0 and brief.stdout == serial.stdout


def test_a_log_with_learned_templates_splits_by_address(tmp_path):
    """An invented service log: each worker learns the same templates from the whole file, then counts its slice."""
    rng = np.random.default_rng(8)
    kinds = ["session opened for user {u}", "session closed for user {u}", "disk {d} at {p}% capacity",
             "job {j} finished in {p} s", "connection from 10.0.0.{d} refused"]
    lines = [f"2026-01-0{1 + i // 400} 12:{(i // 60) % 60:02d}:{i % 60:02d} host{rng.integers(1, 4)} svc: "
             + kinds[int(rng.choice(5, p=[0.3, 0.3, 0.2, 0.1, 0.1]))].format(u=f"u{rng.integers(1, 9)}", d=rng.integers(1, 99),
                                                                              p=rng.integers(1, 100), j=rng.integers(1, 500))
             for i in range(2_000)]
    path = tmp_path / "service.log"
    path.write_text("\n".join(lines) + "\n")
    serial = count_files([str(path)], 4, ReaderOptions(fmt="log"), top=3)
    for workers in (2, 3):
        split = count_files([str(path)], 4, ReaderOptions(fmt="log"), top=3, engine=InProcess(workers), keep_counts=False)
        assert to_json(split.to_dict()) == to_json(serial.to_dict())


@pytest.mark.parametrize("case", ["too deep", "two alphabets", "empty"])
def test_bad_inputs_give_the_serial_sentence(tmp_path, case):
    good = tmp_path / "g.fa"
    good.write_text(">g invented\nACGTTGCAACGT\n")
    if case == "too deep":
        paths, depth, options = [good], 40, ReaderOptions()
    elif case == "two alphabets":
        other = tmp_path / "p.txt"
        other.write_text("0110100110010110\n")
        paths, depth, options = [good, other], 3, ReaderOptions(fmt="auto", alphabet="learn")
    else:
        empty = tmp_path / "e.fa"
        empty.write_text("")
        paths, depth, options = [empty], 3, ReaderOptions()
    with pytest.raises(Exception) as serial:
        count_files([str(p) for p in paths], depth, options)
    with pytest.raises(Exception) as split:
        count_files([str(p) for p in paths], depth, options, engine=InProcess(2), keep_counts=False)
    assert type(split.value) is type(serial.value) and str(split.value) == str(serial.value)


def test_workers_beyond_the_plan_count_nothing(tmp_path):
    """Depth 1 over DNA has four words: a fifth worker plans the same four slices and returns nothing."""
    path = tmp_path / "x.fa"
    path.write_text(">x invented\nACGTTGCA\n")
    options = ReaderOptions()
    assert count_slice(((str(path),), options.open, 1, 4, 5, 0, False)) is None
    assert count_slice(((str(path),), options.open, 1, 3, 5, 0, False)).where.index == 3
