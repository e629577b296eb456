"""How good are the word labels: word and entity scores, intervals, paired tests, calibration.

Prediction frames are word tables with a ``predicted`` column (and ``confidence`` for
calibration); every function here reads only those columns it names.
"""

from dochar.metrics.calibration import expected_calibration_error, reliability_curve
from dochar.metrics.entities import (
                                     EntityScores,
                                     entity_scores,
                                     line_order,
                                     reading_order,
                                     to_bio,
)
from dochar.metrics.intervals import (
                                     PairedResult,
                                     bootstrap_interval,
                                     bootstrap_scores,
                                     paired_comparison,
)
from dochar.metrics.scorers import AdditiveScore, ColumnMean, EntityF1, WordF1
from dochar.metrics.words import (
                                     MetricInputError,
                                     WordScores,
                                     f1_from_confusion,
                                     grouped_confusion,
                                     macro_f1_from_confusion,
                                     micro_f1_from_confusion,
                                     per_group_scores,
                                     score_words,
)

__all__ = [
    "AdditiveScore", "ColumnMean", "EntityF1", "EntityScores", "MetricInputError",
    "PairedResult", "WordF1", "WordScores", "bootstrap_interval", "bootstrap_scores",
    "entity_scores", "expected_calibration_error", "f1_from_confusion", "grouped_confusion",
    "line_order", "macro_f1_from_confusion", "micro_f1_from_confusion", "paired_comparison",
    "per_group_scores", "reading_order", "reliability_curve", "score_words", "to_bio",
]
