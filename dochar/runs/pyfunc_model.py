"""The MLflow model of a run (pyfunc flavour): a word table in, each word's labels out.

MLflow loads this file as "model code" (``mlflow.pyfunc.log_model(python_model=<this file>)``)
instead of unpickling a Python object, and the model itself is read from the logged dochar unit
with dochar's safe loader (:func:`dochar.models.saved.load_model`).

    model = mlflow.pyfunc.load_model("runs:/<run id>/word_labeller")
    words = model.predict(word_table)    # doc_id, page, word_id, ..., predicted, probability,
                                         # top2, top2_probability, top3, top3_probability
"""

from __future__ import annotations

from functools import partial

import mlflow
import pandas as pd
from mlflow.pyfunc import PythonModel

from dochar.data.word_table import validate_word_table
from dochar.models.saved import SavedModelError, load_model
from dochar.records.line_status import settle_pages
from dochar.records.shape import shape_or_none

UNIT_ARTIFACT = "dochar_model"


class WordLabeller(PythonModel):
    """Wraps one saved dochar model; every row of the input must be a valid word-table row."""

    def load_context(self, context) -> None:
        self.saved = load_model(context.artifacts[UNIT_ARTIFACT])
        self.settle = partial(settle_pages, shape=shape_or_none(
            self.saved.manifest["data"].get("record"), labels=self.saved.word_labels))

    def predict(self, context, model_input, params=None):   # no hints: MLflow reads them as a schema
        if not isinstance(model_input, pd.DataFrame):
            raise SavedModelError(f"expected a word table as a pandas DataFrame, got "
                                  f"{type(model_input).__name__}")
        checked = validate_word_table(model_input, source="model input", strict=True)
        return self.saved.label_words(checked.table, settle=self.settle)


mlflow.models.set_model(WordLabeller())
