"""Statistics: mergeable sufficient statistics of calibration data (one pass, any partitioning)."""
from affix.statistics.folds import FOLD_SEED, MAX_FOLDS, fold_of, merge_folds
from affix.statistics.moments import Moments, merge_all, merge_along
from affix.statistics.runs import Run, accumulate, finish, join, merge_parts, run_of
from affix.statistics.units import UnitMoments, unit_shares

__all__ = ["FOLD_SEED", "MAX_FOLDS", "Moments", "Run", "UnitMoments", "accumulate", "finish", "fold_of", "join",
           "merge_all", "merge_along", "merge_folds", "merge_parts", "run_of", "unit_shares"]
