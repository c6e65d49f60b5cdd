"""Known sources with closed-form answers (Markov chains, golden mean, logistic map) and the invented demo scenario."""

from fractalseq.datasets._markov import (
    bernoulli,
    block_entropy_exact,
    entropy_rate,
    golden_mean,
    iid,
    logistic_symbols,
    renyi_rate,
    simulate_markov,
    stationary,
    topological_rate,
)
from fractalseq.datasets._scenario import SCENARIO_NOTE, Scenario, generate

__all__ = [
    "SCENARIO_NOTE", "Scenario", "bernoulli", "block_entropy_exact", "entropy_rate", "generate", "golden_mean",
    "iid", "logistic_symbols", "renyi_rate", "simulate_markov", "stationary", "topological_rate",
]
