"""The public JSON documents keep their keys: a guard for refactors.

Every command that prints JSON (``--json``) or writes a JSON document into its ``--out`` folder is run
through the command line only (``python -m fractalseq ...`` in a child process, no internal imports),
on small fixed inputs with fixed seeds:

- real data with provenance in ``reference/PROVENANCE.md``: the phage lambda genome
  (``lambda_virus.fa.gz``), the 40 kb fragment of human chromosome 17 (``chr17.hg19.part.fa``), two logs
  of ``reference/logs`` and the weekly CO2 series of ``reference/timeseries``;
- the quarterly US macroeconomic table (``timeseries/us_macro_quarterly.csv``, public domain) for the numeric
  documents (several columns, ordinal patterns);
- the invented scenario of ``fractalseq demo`` (simulated samples and relay logs), written by the demo
  itself into a temporary folder.

From each document the *key set* is read: every key path, list elements collapsed to ``[]`` (e.g.
``sources[].dimensions[].estimate``) and maps keyed by data (dropped-symbol reasons, compressor names,
orders, q values) collapsed to ``{}``, with the JSON type of the value found there (number, string,
bool, null, object, array; several types joined by ``|`` when list elements differ, e.g.
``number|null``). The saved key sets live in ``tests/contracts/<document>.json``. The check: every
saved key path is still present and its type is compatible (the types seen now are among the saved
ones; a path saved as ``null`` only, i.e. not computed on this input, accepts any type). New keys are
allowed (the README says so for every contract); they are listed in the failure message only.
A document must be strict JSON: a raw ``NaN`` or ``Infinity`` fails (the contracts say "null means not
computed or not finite").

Regenerating the saved files — only when a contract change is intended *and* documented in the README:

    FRACTALSEQ_REGENERATE_CONTRACTS=1 python -m pytest -q tests/test_json_contracts.py
    # or: python tests/contracts/regenerate.py

Genomic output is for research, not for clinical decisions; drift reports on logs are no security
guarantee.
"""

from __future__ import annotations

import json
import os
import re
import subprocess
import sys
from pathlib import Path

import pytest

#: Whole processes or many of them: part of every CI run; skip in a quick loop with -m 'not slow'.
pytestmark = pytest.mark.slow

HERE = Path(__file__).resolve().parent
CONTRACTS = HERE / "contracts"
REFERENCE = HERE.parent / "reference"
LAMBDA = REFERENCE / "lambda_virus.fa.gz"
CHR17 = REFERENCE / "chr17.hg19.part.fa"
LOGS = REFERENCE / "logs"
CO2 = REFERENCE / "timeseries" / "co2_mauna_loa_weekly.csv"
MACRO = REFERENCE / "timeseries" / "us_macro_quarterly.csv"
REGENERATE = os.environ.get("FRACTALSEQ_REGENERATE_CONTRACTS", "") not in ("", "0")

# Dict-valued keys whose keys are data, not names (collapsed to "{}" in key paths).
MAP_KEYS = frozenset({"dropped", "bits_per_symbol", "compressed_bytes", "candidate_bits_per_symbol", "renyi_bits"})
# Fallback: a dict with any key that is not name-like (spaces, slashes, dots, leading digits) is a map too.
NAME_LIKE = re.compile(r"^[A-Za-z_][A-Za-z0-9_\-]*$")

DEMO_LENGTH = "20000"  # long enough for finite D_q in the survey and an absent word in kelp-island
DEMO_SEED = "7"


# ----------------------------------------------------------------------------------------------- key sets


def _type_name(value) -> str:
    if value is None:
        return "null"
    if isinstance(value, bool):
        return "bool"
    if isinstance(value, (int, float)):
        return "number"
    if isinstance(value, str):
        return "string"
    if isinstance(value, list):
        return "array"
    if isinstance(value, dict):
        return "object"
    raise TypeError(f"not a JSON value: {value!r}")


def _walk(value, path: str, last_key: str, out: dict[str, set[str]]) -> None:
    out.setdefault(path, set()).add(_type_name(value))
    if isinstance(value, dict):
        is_map = bool(value) and (last_key in MAP_KEYS or not all(NAME_LIKE.match(k) for k in value))
        for key, item in value.items():
            if is_map:
                _walk(item, path + "{}", last_key, out)
            else:
                _walk(item, f"{path}.{key}" if path else key, key, out)
    elif isinstance(value, list):
        for item in value:
            _walk(item, path + "[]", last_key, out)


def key_types(document) -> dict[str, set[str]]:
    """Every key path of a parsed JSON document with the set of JSON types found there."""
    out: dict[str, set[str]] = {}
    _walk(document, "", "", out)
    out.pop("", None)
    return out


def merge(*sets: dict[str, set[str]]) -> dict[str, set[str]]:
    out: dict[str, set[str]] = {}
    for s in sets:
        for path, types in s.items():
            out.setdefault(path, set()).update(types)
    return out


def strict_loads(text: str, what: str):
    """Parse JSON, refusing the non-standard constants NaN, Infinity and -Infinity."""
    found: list[str] = []
    doc = json.loads(text, parse_constant=found.append)
    assert not found, f"{what}: non-standard JSON constants {sorted(set(found))} (the contract uses null)"
    return doc


def check_or_save(name: str, seen: dict[str, set[str]], description: dict) -> None:
    """Compare a key set with tests/contracts/NAME.json, or rewrite that file when regenerating."""
    target = CONTRACTS / f"{name}.json"
    if REGENERATE:
        CONTRACTS.mkdir(exist_ok=True)
        record = dict(description)
        record["key_paths"] = len(seen)
        record["paths"] = {p: "|".join(sorted(t)) for p, t in sorted(seen.items())}
        target.write_text(json.dumps(record, indent=1, ensure_ascii=False) + "\n", encoding="utf-8")
        return
    assert target.is_file(), f"no saved contract {target}; run tests/contracts/regenerate.py once"
    saved = json.loads(target.read_text(encoding="utf-8"))["paths"]
    missing = sorted(p for p in saved if p not in seen)
    changed = []
    for path, spec in saved.items():
        if path not in seen:
            continue
        allowed = set(spec.split("|"))
        if allowed == {"null"}:
            continue  # not computed on this input when saved: its type is unknown
        if not seen[path] <= allowed:
            changed.append(f"{path}: saved {spec}, now {'|'.join(sorted(seen[path]))}")
    if missing or changed:
        added = sorted(p for p in seen if p not in saved)
        lines = [f"{name}: the JSON contract changed ({target.name})"]
        lines += [f"  missing key path: {p}" for p in missing]
        lines += [f"  incompatible type: {c}" for c in changed]
        lines += [f"  (new key path, allowed: {p})" for p in added]
        pytest.fail("\n".join(lines), pytrace=False)


# ----------------------------------------------------------------------------------------------- runs


def run_cli(args: list[str], cwd: Path, codes: tuple[int, ...] = (0,)) -> str:
    cmd = [sys.executable, "-m", "fractalseq", *[str(a) for a in args]]
    proc = subprocess.run(cmd, capture_output=True, text=True, cwd=cwd, timeout=600)
    assert proc.returncode in codes, f"{' '.join(cmd[2:])}: exit {proc.returncode}\n{proc.stderr}"
    return proc.stdout


@pytest.fixture(scope="module")
def work(tmp_path_factory) -> Path:
    """A folder holding the demo's invented scenario (and its report) plus two learned models."""
    root = tmp_path_factory.mktemp("contracts")
    demo_stdout = run_cli(
        ["demo", "--out", "demo", "--length", DEMO_LENGTH, "--seed", DEMO_SEED, "--json", "--quiet"], root
    )
    (root / "demo-stdout.json").write_text(demo_stdout, encoding="utf-8")
    return root


def _macro_part(root: Path, which: str) -> Path:
    """The real quarterly US macro table cut at 1984 (rows before, or from 1984 on), written once into the work folder."""
    path = root / f"macro-{which}.csv"
    if not path.exists():
        lines = MACRO.read_text(encoding="utf-8").splitlines()
        keep = [ln for ln in lines[1:] if (int(ln.split(",")[0]) < 1984) == (which == "before")]
        path.write_text("\n".join([lines[0], *keep]) + "\n", encoding="utf-8")
    return path


def _samples(root: Path) -> Path:
    return root / "demo" / "data" / "samples"


def _logs(root: Path) -> Path:
    return root / "demo" / "data" / "logs"


def _learn_dna(root: Path) -> list[str]:
    return ["learn", _samples(root) / "kelp-chain.fa", "-o", "kelp.npz", "--json", "--quiet", "--force"]


def _learn_log(root: Path) -> list[str]:
    return ["learn", _logs(root) / "relay-week1.log", "--format", "log", "-o", "relay.npz", "--json", "--quiet",
            "--force"]


def _profile(root: Path) -> list[str]:
    return ["profile", LAMBDA, _samples(root) / "kelp-island.fa", "--boot", "20", "--seed", "1", "--json", "--quiet"]


# name -> (description of the run, function of the work folder giving the argument lists to run in order;
# the last one's standard output is the document), allowed exit statuses of the last run.
COMMANDS = {
    "count": ("count --json: merged word counts of a demo sample, depth 6, top 5",
              lambda r: [["count", _samples(r) / "kelp-chain.fa", "--depth", "6", "--top", "5", "--json", "--quiet"]],
              (0,)),
    "profile": ("profile --json: phage lambda and the demo's kelp-island sample (an absent word), --boot 20 --seed 1",
                lambda r: [_profile(r)], (0,)),
    "survey": ("survey --json: three demo samples, no cache",
               lambda r: [["survey", *(_samples(r) / f for f in ("kelp-chain.fa", "reef-skewed.fa", "kelp-island.fa")),
                           "--no-cache", "--seed", "0", "--json", "--quiet"]], (0,)),
    "drift": ("drift --json: the demo's two relay log batches, --format log, 99 permutations, seed 0",
              lambda r: [["drift", _logs(r) / "relay-week1.log", _logs(r) / "relay-week2.log", "--format", "log",
                          "--permutations", "99", "--seed", "0", "--json", "--quiet"]], (0, 1)),
    "profile-series": ("profile --json: two columns of the real quarterly US macro table as ordinal patterns of order 3, "
                       "delay 2, --boot 20 --seed 1 (permutation_entropy filled in)",
                       lambda r: [["profile", MACRO, "--column", "realgdp,infl", "--ordinal", "3", "--delay", "2",
                                   "--boot", "20", "--seed", "1", "--json", "--quiet"]], (0,)),
    "drift-columns": ("drift --json --column a,b: the real quarterly US macro table before 1984 against 1984 on, "
                      "two columns, 99 permutations, seed 0",
                      lambda r: [["drift", _macro_part(r, "before"), _macro_part(r, "after"), "--column", "realgdp,unemp",
                                  "--permutations", "99", "--seed", "0", "--json", "--quiet"]], (0, 1)),
    "scan": ("scan --json: chr17 fragment (soft-masked repeats give a low-complexity run), window 1000",
             lambda r: [["scan", CHR17, "--window", "1000", "--seed", "0", "--json", "--quiet"]], (0,)),
    "learn": ("learn --json: model of the demo's kelp-chain sample",
              lambda r: [_learn_dna(r)], (0,)),
    "scan-log": ("scan --json: a real package-manager log (reference/logs/dpkg-excerpt.log), default window of lines; "
                 "file line numbers and dominant templates",
                 lambda r: [["scan", LOGS / "dpkg-excerpt.log", "--json", "--quiet"]], (0,)),
    "scan-numeric": ("scan --json: the weekly Mauna Loa CO2 series (reference/timeseries), default window of rows; "
                     "file line numbers and dates of the rows",
                     lambda r: [["scan", CO2, "--json", "--quiet"]], (0,)),
    "score-online-log": ("score --json --online: a real sshd log with blank lines (reference/logs/fail2ban-sshd.log); "
                         "windows located by file line numbers",
                         lambda r: [["score", LOGS / "fail2ban-sshd.log", "--online", "--json", "--quiet"]], (0,)),
    "next-log": ("next --json: a context of template ids under the model of the demo's first relay log batch",
                 lambda r: [_learn_log(r), ["next", "#0 #1", "--model", "relay.npz", "--top", "3", "--json"]], (0,)),
    "learn-log": ("learn --json --format log: model of the demo's first relay log batch (template table)",
                  lambda r: [_learn_log(r)], (0,)),
    "score-fitted": ("score --json --model: kelp-sticky sample read with the kelp-chain model",
                     lambda r: [_learn_dna(r), ["score", _samples(r) / "kelp-sticky.fa", "--model", "kelp.npz",
                                                "--json", "--quiet"]], (0,)),
    "score-online": ("score --json --online: kelp-sticky sample, no model",
                     lambda r: [["score", _samples(r) / "kelp-sticky.fa", "--online", "--json", "--quiet"]], (0,)),
    "score-fitted-log": ("score --json --model --format log: second relay batch read with the first batch's model "
                         "(unseen templates)",
                         lambda r: [_learn_log(r), ["score", _logs(r) / "relay-week2.log", "--format", "log",
                                                    "--model", "relay.npz", "--json", "--quiet"]], (0,)),
    "next": ("next --json: most likely symbols after ACGTAC under the kelp-chain model",
             lambda r: [_learn_dna(r), ["next", "ACGTAC", "--model", "kelp.npz", "--top", "4", "--json"]], (0,)),
}

# Documents the demo writes into its --out folder (and its own standard output).
DEMO_FILES = {
    "demo": ("demo --json (standard output): invented scenario, --length 20000 --seed 7", "demo-stdout.json"),
    "demo-out-demo": ("demo --out: demo.json", "demo/demo.json"),
    "demo-out-survey": ("demo --out: survey/survey.json", "demo/survey/survey.json"),
    "demo-out-drift": ("demo --out: drift/drift.json", "demo/drift/drift.json"),
    "demo-out-scan": ("demo --out: scan/scan.json (window 1000, no low-complexity run at this length)",
                      "demo/scan/scan.json"),
}

_OUTPUTS: dict[tuple, str] = {}  # standard output of each distinct run, so a model is learned once


def _run_once(argv: list, root: Path, codes: tuple[int, ...] = (0,)) -> str:
    key = (str(root), *(str(a) for a in argv))
    if key not in _OUTPUTS:
        _OUTPUTS[key] = run_cli(argv, root, codes)
    return _OUTPUTS[key]


def _document(name: str, root: Path) -> str:
    _, steps, codes = COMMANDS[name]
    argvs = steps(root)
    for argv in argvs[:-1]:
        _run_once(argv, root)
    return _run_once(argvs[-1], root, codes)


def _shown(argv: list) -> str:
    return " ".join(Path(a).name if isinstance(a, Path) else a for a in argv)


@pytest.mark.parametrize("name", list(COMMANDS))
def test_command_json_keeps_its_contract(work, name):
    text = _document(name, work)
    doc = strict_loads(text, name)
    what, steps, _ = COMMANDS[name]
    shown = ["fractalseq " + _shown(a) for a in steps(work)]
    check_or_save(name, key_types(doc), {"document": what, "commands": shown})


@pytest.mark.parametrize("name", list(DEMO_FILES))
def test_demo_documents_keep_their_contract(work, name):
    what, rel = DEMO_FILES[name]
    doc = strict_loads((work / rel).read_text(encoding="utf-8"), rel)
    shown = f"fractalseq demo --out demo --length {DEMO_LENGTH} --seed {DEMO_SEED} --json --quiet"
    check_or_save(name, key_types(doc), {"document": what, "commands": [shown]})


def test_profile_same_seed_same_bytes(work):
    first = _document("profile", work)
    again = run_cli(_profile(work), work)
    assert first.encode("utf-8") == again.encode("utf-8")


def test_profile_out_folder_meets_the_profile_contract(work):
    # --out DIR writes DIR/profile.json (all inputs; README: --json prints the same) and DIR/NAME/profile.json
    argv = [a for a in _profile(work) if a not in ("--json",)] + ["--out", "profile-out"]
    run_cli(argv, work)
    folder = work / "profile-out"
    whole = strict_loads((folder / "profile.json").read_text(encoding="utf-8"), "profile.json")
    assert whole == strict_loads(_document("profile", work), "profile --json")
    per_input = sorted(folder.glob("*/profile.json"))
    assert len(per_input) == 2, per_input
    union = merge(*(key_types(strict_loads(p.read_text(encoding="utf-8"), str(p))) for p in per_input))
    if not REGENERATE:
        check_or_save("profile", union, {})
