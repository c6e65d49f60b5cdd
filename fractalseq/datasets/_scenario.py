"""The invented demo scenario, generated from a seed, with its known ground truth.

**Everything here is invented and simulated.**  The scenario: the (fictional)
Kelpwater Marine Station sequences symbiont samples and runs a telemetry relay
that forwards tide-gauge readings to an archive.  The station's analyst wants
to know how complex each sample is, which samples are alike, whether this
week's relay log differs from last week's, and where along one sample a
low-complexity stretch sits.  The samples are simulated from Markov chains
whose entropy rates and Rényi dimensions are known in closed form; one sample
carries an inserted tandem-repeat island at a known position.  The relay logs
are a collector's weekly files of three invented services (two relay hosts
writing RFC 3164 syslog lines, a gauge hub writing RFC 5424 lines, an archive
gateway writing JSON lines) with varying fields (relay and gauge numbers, frame
ids, durations, addresses, paths, session ids); the second week contains a
failure mode (three new event kinds) that the first week never shows.
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
    """The two relay-log batches and what changed between them (``new_templates``: the templates of the new event kinds)."""

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
# The station's log collector gathers three services into one file per week (all invented):
#   * two relay hosts (relay-north runs relays r1 and r2, relay-south r3 and r4) write RFC 3164 syslog lines
#     ("Mar  1 00:00:04 relay-north tide-relay[2311]: ...", a level word on some);
#   * the gauge hub writes RFC 5424 lines ("<134>1 2031-03-01T00:00:04.120Z gauge-hub gauged 4121 - - ...");
#   * the archive gateway writes JSON lines (one object per line, its event in "event").
# Event formats (index = state of the healthy relay's chain); fields in braces vary from line to line.
_EVENTS = (
    ("relay", "relay {relay} accepted reading from gauge {gauge}: level={level}m"),
    ("relay", "relay {relay} queued frame {frame} for archive"),
    ("archive", '{{"ts": "{iso}", "service": "archive", "level": "info", "event": "upload_done", "frames": {n}, '
                '"ms": {ms}, "path": "/srv/archive/2031/{day}/batch-{batch}.tar", "client": "{ip}"}}'),
    ("gauge", "heartbeat from gauge {gauge} ok in {ms}ms"),
    ("relay", "WARN upload to archive {archive}:8443 slow: {ms} ms, retrying (attempt {k})"),
    ("relay", "relay {relay} reconnected to archive after {sec}s, session {session}"),
)
#: the week-2 failure mode (new event kinds): a gauge sends frames whose checksum fails
_FAILURE = (
    ("relay", "ERROR checksum mismatch on gauge {gauge} frame {frame}"),
    ("relay", "frame {frame} dropped after checksum failure"),
    ("archive", '{{"ts": "{iso}", "service": "archive", "level": "warn", "event": "frame_rejected", "frame": "{frame}", '
                '"reason": "checksum", "client": "{ip}"}}'),
)
#: the templates of the failure mode's lines, written by hand from the formats above in the notation of
#: fractalseq's templates (README "Templates"): header set aside, values as <*>, a JSON object as its sorted
#: keys with the values of event-naming keys kept
FAILURE_TEMPLATES = (
    "checksum mismatch on gauge <*> frame <*>",
    "frame <*> dropped after checksum failure",
    "{ client=<*> event=frame_rejected frame=<*> level=warn reason=<*> service=<*> ts=<*> }",
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
_MONTHS = "Jan Feb Mar Apr May Jun Jul Aug Sep Oct Nov Dec".split()


def _fill(source: str, template: str, rng: np.random.Generator, t: float, day0: int) -> str:
    """One log line of ``source`` (relay, gauge, archive) at ``t`` seconds after midnight of March ``day0``."""
    relay = int(rng.integers(1, 5))
    fields = {
        "relay": f"r{relay}",
        "gauge": f"{rng.integers(100, 140)}",
        "level": f"{rng.normal(2.0, 0.6):.2f}",
        "frame": f"0x{rng.integers(0, 2**32):08x}",
        "n": f"{rng.integers(5, 60)}",
        "ms": f"{int(rng.gamma(2.0, 40.0))}",
        "sec": f"{rng.gamma(2.0, 3.0):.1f}",
        "k": f"{rng.integers(1, 4)}",
        "archive": f"10.4.0.{rng.integers(2, 6)}",
        "ip": f"10.4.{rng.integers(1, 3)}.{rng.integers(10, 250)}",
        "batch": f"{rng.integers(0, 10**6):06d}",
        "session": "-".join(f"{rng.integers(0, 16**w):0{w}x}" for w in (8, 4, 4, 4, 12)),
    }
    secs = int(t)
    day, rem = divmod(secs, 86400)
    hh, rem = divmod(rem, 3600)
    mm, ss = divmod(rem, 60)
    ms = int((t - secs) * 1000)
    d = day0 + day
    iso = f"2031-03-{d:02d}T{hh:02d}:{mm:02d}:{ss:02d}.{ms:03d}Z"
    fields["iso"], fields["day"] = iso, f"03/{d:02d}"
    msg = template.format(**fields)
    if source == "archive":
        return msg
    if source == "gauge":
        return f"<134>1 {iso} gauge-hub gauged 4121 - - {msg}"
    host, pid = ("relay-north", 2311) if relay <= 2 else ("relay-south", 1870)
    return f"{_MONTHS[2]} {d:2d} {hh:02d}:{mm:02d}:{ss:02d} {host} tide-relay[{pid}]: {msg}"


def simulate_log(lines: int, seed: int, failure_rate: float, day0: int = 1) -> str:
    """Collector log lines of the three services; with ``failure_rate > 0`` checksum failures (a new failure mode) appear."""
    rng = np.random.default_rng(seed)
    cum = np.cumsum(_HEALTHY, axis=1)
    state = 0
    t = 0.0
    out = []
    for _ in range(lines):  # generating text is inherently per line; the demo keeps it small
        t += rng.exponential(4.0)
        if failure_rate and state == 1 and rng.random() < failure_rate:
            for k, (src, fmt) in enumerate(_FAILURE):
                out.append(_fill(src, fmt, rng, t + 0.01 * k, day0))
            state = 4  # a failure makes the next upload slow
            continue
        state = int(np.searchsorted(cum[state], rng.random(), side="right"))
        state = min(state, len(_EVENTS) - 1)
        out.append(_fill(*_EVENTS[state], rng, t, day0))
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
    write_text(week1, simulate_log(log_lines, seed + 1, 0.0, day0=1), force=force)
    write_text(week2, simulate_log(log_lines, seed + 2, 0.08, day0=8), force=force)
    logs = LogTruth(str(week1), str(week2), True, FAILURE_TEMPLATES, (log_lines, log_lines))
    return Scenario(str(folder), seed, tuple(truths), logs)
