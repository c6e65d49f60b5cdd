"""The bootstrap settings of every public estimator, in one validated object: :class:`Resampling`.

Replicate count, seed, block length, resampling scheme, confidence level and
interval method travel together; they are checked once, when the object is
made, and each error names the field at fault.  :func:`check_seed` is the one
rule for seeds (a whole number with ``0 <= seed < 2**64``), shared by the jobs.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from fractalseq.errors import ParameterError
from fractalseq.resampling._intervals import INTERVALS
from fractalseq.resampling._plan import SCHEMES

if TYPE_CHECKING:  # the block-length module loads numba kernels: imported only where a BlockLength is given
    from fractalseq.resampling._block_length import BlockLength

#: Seeds are whole numbers below this bound (the width of numpy's seed words times two).
SEED_BOUND = 1 << 64

#: Fewest replicates that give an interval (the tails of a 95% interval need a few replicates each).
MIN_REPLICATES = 20

__all__ = ["MIN_REPLICATES", "SEED_BOUND", "Resampling", "as_resampling", "check_seed"]


def check_seed(seed: object) -> int:
    """Return ``seed`` as an int if it is a whole number with ``0 <= seed < 2**64``.

    Raises
    ------
    ParameterError
        For anything else (``parameter="seed"``).
    """
    if isinstance(seed, bool) or not isinstance(seed, int) and not hasattr(seed, "__index__"):
        raise ParameterError(f"The seed must be a whole number from 0 to 2**64 - 1, not {seed!r}.", parameter="seed")
    value = int(seed)  # type: ignore[call-overload]
    if not 0 <= value < SEED_BOUND:
        raise ParameterError(f"The seed must be a whole number from 0 to 2**64 - 1, not {value}.", parameter="seed")
    return value


def check_replicates(n_boot: object) -> int:
    """Return ``n_boot`` as an int if it is 0 (no interval) or a whole number of at least :data:`MIN_REPLICATES`."""
    if isinstance(n_boot, bool) or not isinstance(n_boot, (int, np.integer)) or n_boot < 0:
        raise ParameterError(
            f"Bootstrap replicates must be 0 (none) or a whole number of at least {MIN_REPLICATES}, not {n_boot!r}.",
            parameter="n_boot",
        )
    if 0 < n_boot < MIN_REPLICATES:
        raise ParameterError(
            f"{n_boot} bootstrap replicates are too few for an interval; use 0 (none) or at least {MIN_REPLICATES}.",
            parameter="n_boot",
        )
    from fractalseq.guards import check_memory

    # a replicate draws at least 10 blocks (the block length is capped at a tenth of the stream), 24 bytes each
    check_memory(int(n_boot) * REPLICATE_FLOOR_BYTES, f"{int(n_boot)} bootstrap replicates (their block draws, at least "
                 f"{REPLICATE_FLOOR_BYTES} bytes each)", "n_boot", "use fewer replicates")
    return int(n_boot)


def _is_block_length(value: object) -> bool:
    """Is ``value`` a :class:`BlockLength` (imported only then: the module loads numba kernels)."""
    if isinstance(value, (bool, int, float, str, np.integer, np.floating)):
        return False
    from fractalseq.resampling._block_length import BlockLength

    return isinstance(value, BlockLength)


#: Fewest bytes a replicate's block draws take (10 blocks x start, length and index, 8 bytes each).
REPLICATE_FLOOR_BYTES = 240


@dataclass(frozen=True)
class Resampling:
    """How an estimate gets its block-bootstrap interval (checked when made).

    Attributes
    ----------
    n_boot:
        Bootstrap replicates: 0 for no interval, else at least 20.
    seed:
        Seed of the resampling, ``0 <= seed < 2**64``; the same seed gives the same replicates.
    block_length:
        Block length in symbols (a positive whole number, or a
        :class:`~fractalseq.resampling.BlockLength` chosen before), or ``None``
        to choose it from the data (:func:`~fractalseq.resampling.choose_block_length`).
    scheme:
        ``"nonoverlapping"`` (default), ``"moving"`` or ``"stationary"`` blocks.
    level:
        Confidence level of the interval, in (0.5, 1).
    interval:
        Interval method: ``"centered"`` (default), ``"percentile"``, ``"basic"`` or ``"bc"``
        (see :func:`~fractalseq.resampling.interval_from`).

    Examples
    --------
    >>> Resampling(n_boot=60, seed=3).level
    0.95
    >>> Resampling.none().n_boot
    0
    """

    n_boot: int = 200
    seed: int = 0
    block_length: int | BlockLength | None = None
    scheme: str = "nonoverlapping"
    level: float = 0.95
    interval: str = "centered"

    def __post_init__(self) -> None:
        object.__setattr__(self, "n_boot", check_replicates(self.n_boot))
        object.__setattr__(self, "seed", check_seed(self.seed))
        ell = self.block_length
        if ell is not None and not _is_block_length(ell):
            if isinstance(ell, bool) or not isinstance(ell, (int, np.integer)) or ell < 1:
                raise ParameterError(
                    f"Block length must be a positive whole number of symbols, not {ell!r}.", parameter="block_length"
                )
            object.__setattr__(self, "block_length", int(ell))
        if self.scheme not in SCHEMES:
            raise ParameterError(
                f"Unknown bootstrap scheme {self.scheme!r}; use one of {', '.join(SCHEMES)}.", parameter="scheme"
            )
        level = self.level
        if isinstance(level, bool) or not isinstance(level, (int, float, np.floating, np.integer)):
            raise ParameterError(f"Confidence level must be a number in (0.5, 1), not {level!r}.", parameter="level")
        if not 0.5 < level < 1:
            raise ParameterError(f"Confidence level {level} is outside (0.5, 1); use e.g. 0.95.", parameter="level")
        object.__setattr__(self, "level", float(level))
        if self.interval not in INTERVALS:
            raise ParameterError(
                f"Unknown interval method {self.interval!r}; use one of {', '.join(INTERVALS)}.", parameter="interval"
            )

    @classmethod
    def none(cls, seed: int = 0) -> "Resampling":
        """No bootstrap: estimates only (``n_boot=0``)."""
        return cls(n_boot=0, seed=seed)

    @property
    def enabled(self) -> bool:
        """Whether any replicate is drawn."""
        return self.n_boot > 0


def as_resampling(value: Resampling | None, default: Resampling | None = None) -> Resampling:
    """``value`` itself, ``default`` (or ``Resampling()``) when it is ``None``; anything else is refused."""
    if value is None:
        return default if default is not None else Resampling()
    if not isinstance(value, Resampling):
        raise ParameterError(
            f"resampling must be a Resampling object (e.g. Resampling(n_boot=200, seed=0)) or None, not {value!r}.",
            parameter="resampling",
        )
    return value
