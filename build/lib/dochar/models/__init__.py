"""Models that label words: the GNN stack with a layer chosen by name, and scikit-learn baselines."""

from dochar.models.gnn import GNNStack, count_parameters
from dochar.models.layers import LAYERS, make_layer

__all__ = ["GNNStack", "count_parameters", "LAYERS", "make_layer"]
