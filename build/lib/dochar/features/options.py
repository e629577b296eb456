"""The error of a feature option as the config gives it (``features.*``, ``data.lexicons``)."""

from __future__ import annotations

from dochar.errors import DocharError


class FeatureOptionError(DocharError):
    """A feature option no featurizer or encoder can be built from; the message names its key."""
