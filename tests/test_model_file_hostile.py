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
