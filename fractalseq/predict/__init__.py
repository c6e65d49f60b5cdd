"""A fast count-based predictor of the next symbol, its model file, and the baselines it is measured against.

:class:`CellPredictor` follows the scikit-learn estimator contract (parameters
in ``__init__``, learning in ``fit``, learned state in attributes ending in
``_``); :func:`online_code_length` scores a stream adaptively (predict, then
learn), which bounds the entropy rate from above.
"""

from fractalseq.predict._baselines import (
    CompressorMeter,
    MarkovBaseline,
    compressor_bits,
    kt_bits,
    kt_bits_by_order,
)
from fractalseq.predict._modelfile import (
    ModelState,
    read_header,
    read_state,
    write_state,
)
from fractalseq.predict._online import OnlineCoder, evaluate_online, online_code_length
from fractalseq.predict._params import baseline_orders
from fractalseq.predict._predictor import CellPredictor, load_model, save_model
from fractalseq.predict._results import (
    CalibrationBin,
    FittedMemory,
    OnlineMemory,
    PredictionResult,
    RecordScore,
    SurprisingWindow,
)

__all__ = [
    "CalibrationBin", "CellPredictor", "FittedMemory", "OnlineMemory", "RecordScore", "SurprisingWindow", "CompressorMeter", "MarkovBaseline", "ModelState", "OnlineCoder", "PredictionResult", "baseline_orders",
    "compressor_bits", "evaluate_online", "kt_bits", "kt_bits_by_order", "load_model", "online_code_length",
    "read_header", "read_state", "save_model", "write_state",
]
