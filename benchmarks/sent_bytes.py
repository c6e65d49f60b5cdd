"""Bytes the parent process sends to its workers for one ``score --model`` or ``scan`` on two processes.

Run with ``PYTHONPATH`` set to the tree to measure (so an older checkout can be measured with
the same script): a processes engine whose ``submit`` also pickles each task argument as the
process pool does and adds up the bytes.  Prints one JSON line: ``sent_bytes``, ``tasks``,
``largest_task_bytes``.  Used by ``bench_engine_commands.py``.

Usage: python benchmarks/sent_bytes.py score FASTA MODEL PIECE
       python benchmarks/sent_bytes.py scan FASTA PIECE
"""

from __future__ import annotations

import json
import pickle
import sys


def main() -> int:
    from fractalseq.jobs._engines import ProcessEngine

    class Counting(ProcessEngine):
        """Two local worker processes, counting the pickled bytes of every task sent to them."""

        def __init__(self, workers: int) -> None:
            super().__init__(workers)
            self.sent = self.tasks = self.largest = 0

        def submit(self, func, item):
            size = len(pickle.dumps(item, protocol=pickle.HIGHEST_PROTOCOL))
            self.sent += size
            self.tasks += 1
            self.largest = max(self.largest, size)
            return super().submit(func, item)

    what, fasta = sys.argv[1], sys.argv[2]
    with Counting(2) as eng:
        if what == "score":
            from fractalseq.jobs import score_files

            score_files([fasta], sys.argv[3], piece=int(sys.argv[4]), baselines="markov", engine=eng)
        else:
            from fractalseq.jobs._files import scan_file

            scan_file(fasta, piece=int(sys.argv[3]), engine=eng)
        print(json.dumps({"sent_bytes": eng.sent, "tasks": eng.tasks, "largest_task_bytes": eng.largest}))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
