"""Line ends of event logs: CR LF, a lone CR at the end of the file, CRs kept inside a line.

Rule (common practice for text files written on Windows or by terminal programs): a line ends at LF; one CR
right before the LF (or at the very end of the file, with no LF after it) belongs to the line end and is
removed; any other CR is part of the line.  Checked on worked examples, block by block and whole.
"""

from __future__ import annotations

import pytest

from fractalseq.jobs._templates import mine_logs

# (file bytes, the lines as the rule reads them: worked out by hand from the rule above)
CASES = [
    (b"alpha one\r\nbeta two\r\n", ["alpha one", "beta two"]),
    (b"alpha one\r\r\nbeta two\n", ["alpha one\r", "beta two"]),
    (b"alpha one\nbeta two\r", ["alpha one", "beta two"]),
    (b"alpha one\nbeta two\r\r", ["alpha one", "beta two\r"]),
    (b"alpha\rone\r\n\r\nbeta two", ["alpha\rone", "", "beta two"]),
    (b"progress 10%\r20%\r\ndone\r\n", ["progress 10%\r20%", "done"]),
]


@pytest.mark.parametrize("data, lines", CASES)
@pytest.mark.parametrize("block", [1, 7, 1 << 20])
def test_cr_before_lf_or_at_the_end_is_removed_whatever_the_blocks(tmp_path, data, lines, block):
    path = tmp_path / "x.log"
    path.write_bytes(data)
    run = mine_logs([str(path)], block_size=block)
    ids = run.inputs[0].line_ids()
    assert len(ids) == len(lines)
    assert [i is None for i in ids] == [not ln.strip() for ln in lines]
    examples = {t["id"]: t["example"] for t in run.templates}
    firsts = {}
    for ln, i in zip(lines, ids):
        if i is not None:
            firsts.setdefault(i, ln)
    assert examples == firsts
