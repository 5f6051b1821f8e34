"""Statistics: mergeable sufficient statistics of calibration data (one pass, any chunk order)."""
from affix.statistics.folds import FOLD_SEED, MAX_FOLDS, accumulate, fold_of, merge_folds
from affix.statistics.moments import Moments, merge_all
from affix.statistics.units import UnitMoments, accumulate_units, unit_shares

__all__ = ["FOLD_SEED", "MAX_FOLDS", "Moments", "accumulate", "fold_of", "merge_all", "merge_folds",
           "UnitMoments", "accumulate_units", "unit_shares"]
