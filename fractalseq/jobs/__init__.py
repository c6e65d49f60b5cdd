"""Whole jobs over files: one source's profile, a survey of many, and the engines that run them."""

from fractalseq.jobs._engines import DaskEngine, ProcessEngine, make_engine
from fractalseq.jobs._learn_score import LearnReport, ScoreReport, SourceScore, learn_files, score_files
from fractalseq.jobs._profile import ProfileResult, contract, profile_source
from fractalseq.jobs._survey import SurveyOptions, SurveyResult, expand_inputs, run_survey

__all__ = [
    "DaskEngine", "ProcessEngine", "ProfileResult", "SurveyOptions", "SurveyResult", "contract", "expand_inputs",
    "make_engine", "profile_source", "run_survey",
]
__all__ += ["LearnReport", "ScoreReport", "SourceScore", "learn_files", "score_files"]
