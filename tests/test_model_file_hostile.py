"""Model files whose checksums are right but whose settings are impossible are refused on load.

A model file is read as hostile input: the container checks its members and sizes
(tests/test_npz_container.py), and the predictor checks every setting in the header exactly
as ``fit`` checks its parameters before a table is trusted (rules of this code base).
"""

from __future__ import annotations

import numpy as np
import pytest

from _paths import CLI, LAMBDA
from fractalseq.errors import ModelFileError
from fractalseq.predict import CellPredictor
from fractalseq.predict._modelfile import ModelState, read_state, write_state
from fractalseq.sources import open_source


@pytest.fixture(scope="module")
def model_path(tmp_path_factory):
    path = tmp_path_factory.mktemp("models") / "lambda.npz"
    CellPredictor(max_depth=6).fit(open_source(LAMBDA)).save(path)
    return path


def _altered(model_path, tmp_path, change) -> str:
    state = read_state(model_path)
    header = {k: v for k, v in state.header.items() if k not in ("sha256", "arrays")}
    change(header)
    out = tmp_path / "altered.npz"
    write_state(ModelState(header=header, arrays=state.arrays), out)  # checksums refitted: a crafted file
    return str(out)


CASES = {
    "negative smoothing": lambda h: h["params"].update(smoothing=-1.0),
    "discount above one": lambda h: h["params"].update(discount=3.0),
    "zero cell cap": lambda h: h["params"].update(max_cells=0),
    "learning rate above one": lambda h: h["params"].update(learning_rate=5.0),
    "depth beyond the address width": lambda h: h["params"].update(depths=[1000]),
    "ladder that does not match the settings": lambda h: h.update(ladder=[1, 2]),
    "negative baseline order": lambda h: h["baseline"].update(max_order=-3),
}


@pytest.mark.parametrize("name", sorted(CASES))
def test_impossible_settings_are_refused_in_one_sentence(name, model_path, tmp_path):
    path = _altered(model_path, tmp_path, CASES[name])
    with pytest.raises(ModelFileError) as err:
        CellPredictor.load(path)
    message = str(err.value)
    import re

    assert not re.search(r"\. [A-Z]", message) and message.endswith("."), message  # one sentence
    assert "learn the model again" in message


def test_the_unaltered_round_trip_still_loads(model_path, tmp_path):
    path = _altered(model_path, tmp_path, lambda h: None)
    a, b = CellPredictor.load(model_path), CellPredictor.load(path)
    ctx = ["ACGT", "GGC", ""]
    assert np.array_equal(a.predict_proba(ctx), b.predict_proba(ctx))


def test_the_command_line_refuses_a_crafted_model(model_path, tmp_path):
    import subprocess

    path = _altered(model_path, tmp_path, CASES["negative smoothing"])
    run = subprocess.run([*CLI, "next", "ACGT", "--model", path], capture_output=True, text=True)
    assert run.returncode == 2 and "Traceback" not in run.stderr
    assert run.stderr.startswith("error:") and "learn the model again" in run.stderr


def _crafted_tables(model_path, tmp_path, change) -> str:
    state = read_state(model_path)
    header = {k: v for k, v in state.header.items() if k not in ("sha256", "arrays")}
    arrays = {k: v.copy() for k, v in state.arrays.items()}
    change(arrays)
    out = tmp_path / "crafted.npz"
    write_state(ModelState(header=header, arrays=arrays), out)  # checksums refitted: a crafted file
    return str(out)


def _symbol_outside(arrays):
    arrays["words_1"][-1] = np.uint64(1 << 5)  # DNA, depth 1: a word is 2 symbols of 2 bits; bit 5 lies beyond


TABLE_CASES = {
    "zero count": lambda a: a["counts_2"].__setitem__(0, 0),
    "unsorted words": lambda a: a.__setitem__("words_2", a["words_2"][::-1].copy()),
    "word longer than its depth": _symbol_outside,
    "counts of another length": lambda a: a.__setitem__("counts_3", a["counts_3"][:-1].copy()),
}


@pytest.mark.parametrize("name", sorted(TABLE_CASES))
def test_crafted_cell_tables_are_refused_in_one_sentence(name, model_path, tmp_path):
    path = _crafted_tables(model_path, tmp_path, TABLE_CASES[name])
    with pytest.raises(ModelFileError) as err:
        CellPredictor.load(path)
    message = str(err.value)
    assert message.count(". ") == 0 and message.endswith(".") and "learn the model again" in message, message


def test_a_version_1_model_file_is_refused_with_a_sentence(model_path, tmp_path):
    # version 1 kept a (cells, A) count matrix per depth; this version reads only the sparse layout
    from fractalseq.io._npz import write_container

    state = read_state(model_path)
    header = {k: v for k, v in state.header.items() if k not in ("sha256", "arrays")}
    header.update(format="fractalseq-model", version=1)
    old = write_container(tmp_path / "old.npz", header, {"cells_0": np.zeros(1, np.uint64),
                                                         "counts_0": np.ones((1, 4), np.uint32)})
    with pytest.raises(ModelFileError) as err:
        CellPredictor.load(old)
    assert "version 1" in str(err.value) and "learn the model again" in str(err.value)
