"""Rewrite the saved JSON contracts in this folder from the current command-line output.

Use it only when a change of a public JSON document is intended and documented in the README
(sections profile, survey, drift, scan and the ``score --json`` contract): the files here are what
``tests/test_json_contracts.py`` holds every later version to. Each ``NAME.json`` records the commands
that produced the document and every key path (list elements collapsed to ``[]``, maps keyed by data
to ``{}``) with the JSON type(s) of its value.

Run from the repository root::

    python tests/contracts/regenerate.py

which is the same as ``FRACTALSEQ_REGENERATE_CONTRACTS=1 python -m pytest -q tests/test_json_contracts.py``.
Review the diff (``git diff tests/contracts``) before committing: a removed key path or a changed type
breaks readers of the JSON.
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

TEST = Path(__file__).resolve().parents[1] / "test_json_contracts.py"


def main() -> int:
    env = dict(os.environ, FRACTALSEQ_REGENERATE_CONTRACTS="1")
    return subprocess.call([sys.executable, "-m", "pytest", "-q", str(TEST), *sys.argv[1:]], env=env)


if __name__ == "__main__":
    sys.exit(main())
