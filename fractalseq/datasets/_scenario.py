"""The invented demo scenario, generated from a seed, with its known ground truth.

**Everything here is invented and simulated.**  The scenario: the (fictional)
Kelpwater Marine Station sequences symbiont samples and runs a telemetry relay
that forwards tide-gauge readings to an archive.  The station's analyst wants
to know how complex each sample is, which samples are alike, whether this
week's relay log differs from last week's, and where along one sample a
low-complexity stretch sits.  The samples are simulated from Markov chains
whose entropy rates and Rényi dimensions are known in closed form; one sample
carries an inserted tandem-repeat island at a known position; the relay log's
second batch contains a failure mode that the first batch never shows.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from fractalseq.datasets import _markov as markov
from fractalseq.io._outputs import write_text

SCENARIO_NOTE = (
    "Invented scenario: the Kelpwater Marine Station, its symbiont samples and its telemetry relay do not "
    "exist; every sequence and log line was simulated from a seed with known ground truth."
)

DNA = "ACGT"


@dataclass(frozen=True)
class SourceTruth:
    """Known values of one simulated sequence (bits per symbol; D_q at k = 1/2 equals h_q in bits)."""

    name: str
    path: str
    description: str
    length: int
    entropy_rate_bits: float
    renyi_bits: dict  # q -> h_q in bits
    island: tuple[int, int] | None = None

    def dimension(self, q: float) -> float:
        """True D_q of the encoding at k = 1/2 (D_q = h_q / log2(1/k))."""
        return float(self.renyi_bits[float(q)])

    def to_dict(self) -> dict:
        return {
            "name": self.name,
            "path": self.path,
            "description": self.description,
            "length": self.length,
            "entropy_rate_bits": self.entropy_rate_bits,
            "renyi_bits": {str(k): v for k, v in self.renyi_bits.items()},
            "island": list(self.island) if self.island else None,
        }


@dataclass(frozen=True)
class LogTruth:
    """The two relay-log batches and what changed between them."""

    baseline: str
    new: str
    changed: bool
    new_templates: tuple[str, ...]
    lines: tuple[int, int]

    def to_dict(self) -> dict:
        return {
            "baseline": self.baseline,
            "new": self.new,
            "changed": self.changed,
            "new_templates": list(self.new_templates),
            "lines": list(self.lines),
        }


@dataclass(frozen=True)
class Scenario:
    """Files written for the demo and their ground truth."""

    folder: str
    seed: int
    sources: tuple[SourceTruth, ...]
    logs: LogTruth
    note: str = field(default=SCENARIO_NOTE)

    def to_dict(self) -> dict:
        return {
            "folder": self.folder,
            "seed": self.seed,
            "note": self.note,
            "sources": [s.to_dict() for s in self.sources],
            "logs": self.logs.to_dict(),
        }


# Transition matrices (rows sum to one). Codes: A=0, C=1, G=2, T=3.
SKEW = np.array([0.4, 0.1, 0.1, 0.4])
ORDER1 = np.array(
    [
        [0.40, 0.10, 0.20, 0.30],
        [0.30, 0.30, 0.05, 0.35],
        [0.25, 0.25, 0.30, 0.20],
        [0.20, 0.20, 0.30, 0.30],
    ]
)
STICKY = np.array(
    [
        [0.70, 0.10, 0.10, 0.10],
        [0.10, 0.70, 0.10, 0.10],
        [0.10, 0.10, 0.70, 0.10],
        [0.10, 0.10, 0.10, 0.70],
    ]
)


def _fasta(name: str, codes: np.ndarray, width: int = 70) -> str:
    body = np.frombuffer(DNA.encode("ascii"), np.uint8)[codes].tobytes().decode("ascii")
    lines = [body[i : i + width] for i in range(0, len(body), width)]
    return f">{name} simulated sample (invented scenario)\n" + "\n".join(lines) + "\n"


def _iid_renyi(p: np.ndarray, q: float) -> float:
    if q == 1.0:
        return float(-(p * np.log2(p)).sum())
    return float(math.log2((p**q).sum()) / (1.0 - q))


#: Simulated samples of the scenario, and the fewest bytes a base costs while the demo makes and reads it
#: (its code, its FASTA text, and its 8-byte word address when counted).
SAMPLES = 5
BYTES_PER_BASE = 10


def check_size(length: object, log_lines: object = 6_000) -> tuple[int, int]:
    """Refuse, before anything is simulated, sample lengths or log sizes that cannot be simulated here.

    Raises
    ------
    ParameterError
        ``length`` below 5000 or beyond the memory it implies (``parameter="length"``), or
        ``log_lines`` below 100 or beyond memory (``parameter="log_lines"``).
    """
    from fractalseq.errors import ParameterError
    from fractalseq.guards import check_memory

    for name, value, least in (("length", length, 5_000), ("log_lines", log_lines, 100)):
        if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < least:
            raise ParameterError(f"{name} must be a whole number of at least {least}, not {value!r}.", parameter=name)
    check_memory(SAMPLES * int(length) * BYTES_PER_BASE,
                 f"{SAMPLES} simulated samples of {int(length)} bases (at least {BYTES_PER_BASE} bytes a base)",
                 "length", "use a smaller length")
    check_memory(int(log_lines) * 200, f"two log batches of {int(log_lines)} lines (about 100 bytes a line)",
                 "log_lines", "use fewer log lines")
    return int(length), int(log_lines)


def simulate_sources(length: int, seed: int) -> list[tuple[str, str, np.ndarray, dict, float, tuple | None]]:
    """The simulated symbiont samples: (name, description, codes, renyi_bits, entropy_rate, island)."""
    qs = (0.0, 1.0, 2.0)
    out = []
    rng = np.random.default_rng(seed)
    seeds = rng.integers(0, 2**31, size=8)
    uniform = np.full(4, 0.25)
    out.append(
        ("reef-uniform", "independent, equal base frequencies", markov.iid(length, uniform, int(seeds[0])),
         {q: _iid_renyi(uniform, q) for q in qs}, 2.0, None)
    )
    out.append(
        ("reef-skewed", "independent, AT-rich (0.4, 0.1, 0.1, 0.4)", markov.iid(length, SKEW, int(seeds[1])),
         {q: _iid_renyi(SKEW, q) for q in qs}, _iid_renyi(SKEW, 1.0), None)
    )
    out.append(
        ("kelp-chain", "first-order Markov chain", markov.simulate_markov(ORDER1, length, int(seeds[2])),
         {q: markov.renyi_rate(ORDER1, q) for q in qs}, markov.entropy_rate(ORDER1), None)
    )
    out.append(
        ("kelp-sticky", "first-order chain that tends to repeat its base", markov.simulate_markov(STICKY, length, int(seeds[3])),
         {q: markov.renyi_rate(STICKY, q) for q in qs}, markov.entropy_rate(STICKY), None)
    )
    # the island sample: the first-order chain with a tandem repeat inserted at a known place
    base = markov.simulate_markov(ORDER1, length, int(seeds[4]))
    unit = markov.iid(37, uniform, int(seeds[5]))
    island_len = max(2_000, length // 8)
    island = np.tile(unit, island_len // unit.size + 1)[:island_len]
    at = length // 2
    codes = np.concatenate([base[:at], island, base[at : length - island_len]])
    out.append(
        ("kelp-island", "the first-order chain with a 37-base tandem repeat inserted mid-way",
         codes, {q: markov.renyi_rate(ORDER1, q) for q in qs}, markov.entropy_rate(ORDER1), (at, at + island_len))
    )
    return out


# ---------------------------------------------------------------- relay logs
_EVENTS = (
    "relay {relay} accepted reading from gauge {gauge}: level={level}m",
    "relay {relay} queued frame {frame} for archive",
    "archive upload of {n} frames finished in {ms} ms",
    "heartbeat from gauge {gauge} ok",
    "upload to archive slow: {ms} ms, retrying",
    "relay {relay} reconnected to archive after {ms} ms",
)
_FAILURE = (
    "checksum mismatch on gauge {gauge} frame {frame}",
    "frame {frame} dropped after checksum failure",
)
# event-to-event transition matrix of the healthy relay (rows: previous event)
_HEALTHY = np.array(
    [
        [0.10, 0.60, 0.05, 0.20, 0.03, 0.02],
        [0.50, 0.10, 0.25, 0.10, 0.04, 0.01],
        [0.45, 0.05, 0.05, 0.40, 0.03, 0.02],
        [0.60, 0.10, 0.05, 0.20, 0.03, 0.02],
        [0.10, 0.10, 0.50, 0.05, 0.15, 0.10],
        [0.50, 0.20, 0.10, 0.15, 0.03, 0.02],
    ]
)


def _fill(template: str, rng: np.random.Generator, t: float) -> str:
    fields = {
        "relay": f"r{rng.integers(1, 5)}",
        "gauge": f"{rng.integers(100, 140)}",
        "level": f"{rng.normal(2.0, 0.6):.2f}",
        "frame": f"0x{rng.integers(0, 2**32):08x}",
        "n": f"{rng.integers(5, 60)}",
        "ms": f"{int(rng.gamma(2.0, 40.0))}",
    }
    hh, rem = divmod(int(t), 3600)
    mm, ss = divmod(rem, 60)
    return f"2031-03-{1 + hh // 24:02d}T{hh % 24:02d}:{mm:02d}:{ss:02d}Z tide-relay " + template.format(**fields)


def simulate_log(lines: int, seed: int, failure_rate: float) -> str:
    """Relay log lines; with ``failure_rate > 0`` checksum failures (a new failure mode) appear."""
    rng = np.random.default_rng(seed)
    cum = np.cumsum(_HEALTHY, axis=1)
    state = 0
    t = 0.0
    out = []
    for _ in range(lines):  # generating text is inherently per line; the demo keeps it small
        t += rng.exponential(4.0)
        if failure_rate and state == 1 and rng.random() < failure_rate:
            out.append(_fill(_FAILURE[0], rng, t))
            out.append(_fill(_FAILURE[1], rng, t + 0.01))
            state = 4  # a failure makes the next upload slow
            continue
        state = int(np.searchsorted(cum[state], rng.random(), side="right"))
        state = min(state, len(_EVENTS) - 1)
        out.append(_fill(_EVENTS[state], rng, t))
    return "\n".join(out) + "\n"


def generate(folder: str | Path, seed: int = 7, length: int = 120_000, log_lines: int = 6_000, force: bool = False) -> Scenario:
    """Write the scenario's files into ``folder`` and return them with their ground truth.

    Parameters
    ----------
    folder:
        Destination (created).  Files: ``samples/*.fa``, ``logs/relay-week1.log``, ``logs/relay-week2.log``.
    seed:
        Seed of every random draw; the same seed gives the same bytes.
    length:
        Bases per simulated sample.
    log_lines:
        Lines per log batch (the second batch adds failure lines).
    """
    folder = Path(folder)
    length, log_lines = check_size(length, log_lines)
    truths = []
    for name, desc, codes, renyi, h, island in simulate_sources(length, seed):
        path = folder / "samples" / f"{name}.fa"
        write_text(path, _fasta(name, codes), force=force)
        truths.append(SourceTruth(name, str(path), desc, int(codes.size), float(h), {float(k): float(v) for k, v in renyi.items()}, island))
    week1 = folder / "logs" / "relay-week1.log"
    week2 = folder / "logs" / "relay-week2.log"
    write_text(week1, simulate_log(log_lines, seed + 1, 0.0), force=force)
    write_text(week2, simulate_log(log_lines, seed + 2, 0.08), force=force)
    logs = LogTruth(str(week1), str(week2), True, _FAILURE, (log_lines, log_lines))
    return Scenario(str(folder), seed, tuple(truths), logs)
