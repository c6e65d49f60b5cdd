"""A fast count-based predictor of the next symbol, its model file, and the baselines it is measured against.

:class:`CellPredictor` follows the scikit-learn estimator contract (parameters
in ``__init__``, learning in ``fit``, learned state in attributes ending in
``_``); :func:`online_code_length` scores a stream adaptively (predict, then
learn), which bounds the entropy rate from above.
"""

from fractalseq.predict._baselines import CompressorMeter, MarkovBaseline, compressor_bits, kt_bits, kt_bits_by_order
from fractalseq.predict._modelfile import load_model, read_header, save_model
from fractalseq.predict._predictor import (
    CellPredictor,
    OnlineCoder,
    PredictionResult,
    baseline_orders,
    evaluate_online,
    online_code_length,
)

__all__ = [
    "CellPredictor", "CompressorMeter", "MarkovBaseline", "OnlineCoder", "PredictionResult", "baseline_orders",
    "compressor_bits", "evaluate_online", "kt_bits", "kt_bits_by_order", "load_model", "online_code_length",
    "read_header", "save_model",
]
