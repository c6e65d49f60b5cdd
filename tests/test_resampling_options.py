"""The bootstrap settings object: checked once when made, the same object drives every estimator."""

import dataclasses

import numpy as np
import pytest

import fractalseq as fs
from fractalseq import alphabet as al
from fractalseq.datasets import _markov as markov
from fractalseq.dimensions._spectrum import binomial_dimension, dimension_spectrum
from fractalseq.errors import ParameterError
from fractalseq.resampling import BlockLength, Resampling
from fractalseq.stream import from_codes


@pytest.mark.parametrize(
    "kwargs, parameter",
    [
        (dict(level=1.5), "level"),
        (dict(level=0.5), "level"),
        (dict(level="0.95"), "level"),
        (dict(scheme="circular"), "scheme"),
        (dict(interval="magic"), "interval"),
        (dict(n_boot=1), "n_boot"),
        (dict(n_boot=19), "n_boot"),
        (dict(n_boot=-1), "n_boot"),
        (dict(n_boot=2.5), "n_boot"),
        (dict(n_boot=True), "n_boot"),
        (dict(seed=-1), "seed"),
        (dict(seed=2**64), "seed"),
        (dict(block_length=0), "block_length"),
        (dict(block_length=7.5), "block_length"),
    ],
)
def test_bad_settings_name_the_field(kwargs, parameter):
    """Each refusal is one sentence naming the field (the command line maps it to its option)."""
    with pytest.raises(ParameterError) as err:
        Resampling(**kwargs)
    assert err.value.parameter == parameter
    assert "--" not in str(err.value) and "\n" not in str(err.value)


def test_accepted_settings_and_no_interval():
    """The defaults; 0 and 20 replicates are the edges that are accepted; the object is frozen."""
    rs = Resampling()
    assert (rs.n_boot, rs.seed, rs.block_length, rs.scheme, rs.level, rs.interval) == (
        200, 0, None, "nonoverlapping", 0.95, "centered")
    assert Resampling(n_boot=20, seed=np.int64(7), block_length=np.int32(12)).block_length == 12
    assert Resampling(n_boot=20, seed=np.int64(7)).seed == 7 and type(Resampling(seed=np.int64(7)).seed) is int
    none = Resampling.none(seed=3)
    assert none.n_boot == 0 and not none.enabled and none.seed == 3
    chosen = BlockLength(50, "set by the user: 50", None, 0, 20)
    assert Resampling(block_length=chosen).block_length is chosen
    with pytest.raises(dataclasses.FrozenInstanceError):
        rs.n_boot = 5  # type: ignore[misc]
    assert fs.Resampling is Resampling and "Resampling" in fs.__all__


def test_seed_moves_the_interval_not_the_estimate():
    """Two seeds: the same D_q (it comes from the counts), different interval ends.

    The estimates are held to the binomial measure's closed form
    ``D_q = log2(p**q + (1-p)**q) / (1 - q)`` (Halsey et al. 1986, Phys. Rev. A 33:1141), p = 0.3.
    """
    arr = from_codes(al.binary(), markov.bernoulli(200_000, 0.3, seed=11))
    runs = [dimension_spectrum(arr, qs=(1, 2), falpha=False, resampling=Resampling(n_boot=60, seed=s)) for s in (1, 2)]
    for q in (1, 2):
        a, b = runs[0].get(q), runs[1].get(q)
        assert a.estimate == b.estimate
        assert a.estimate == pytest.approx(binomial_dimension(0.3, q), abs=0.01)
        assert (a.low, a.high) != (b.low, b.high)
    assert runs[0].seed == 1 and runs[1].seed == 2 and runs[0].n_boot == 60
    # no interval at all without replicates: the residual-error fallback is flagged
    bare = dimension_spectrum(arr, qs=(1,), falpha=False, resampling=Resampling.none())
    assert bare.n_boot == 0 and bare.block is None
    assert any("no bootstrap" in f for f in bare.flags)
    with pytest.raises(ParameterError) as err:
        dimension_spectrum(arr, qs=(1,), resampling={"n_boot": 60})
    assert err.value.parameter == "resampling"
