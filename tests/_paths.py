"""Paths and commands shared by the tests (imported by conftest.py and the test modules).

``reference/`` holds small open datasets with their provenance (``reference/PROVENANCE.md``).
"""

from __future__ import annotations

import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
REFERENCE = ROOT / "reference"
#: Enterobacteria phage lambda, from Debian's bowtie2-examples (reference/PROVENANCE.md).
LAMBDA = REFERENCE / "lambda_virus.fa.gz"
LOGS = REFERENCE / "logs"
#: The command line in a child interpreter (same code as the ``fractalseq`` console script).
CLI = [sys.executable, "-c", "import sys; from fractalseq.cli.app import main; sys.exit(main(sys.argv[1:]))"]
