"""Relational graph convolution (R-GCN): one weight matrix per edge type."""

from __future__ import annotations

import weakref
from collections import OrderedDict
from concurrent.futures import ThreadPoolExecutor

import numpy as np
import torch
from scipy.sparse import csr_matrix
from torch import Tensor
from torch_geometric.nn import RGCNConv

from dochar.models.layers.validation import LayerOptionError, check_graph_inputs

AGGREGATIONS = ("mean", "add")


class RelationalLayer(torch.nn.Module):
    r"""R-GCN layer, the propagation rule of Schlichtkrull et al. 2018 (ESWC), eq. 2:

    .. math::
        h_i' = \sum_{r \in \mathcal{R}} \sum_{j \in \mathcal{N}_i^r}
               \frac{1}{c_{i,r}} W_r h_j + W_0 h_i + b,
        \qquad c_{i,r} = |\mathcal{N}_i^r|

    without the nonlinearity σ, which the surrounding block applies after normalisation.
    ``aggr="add"`` sets :math:`c_{i,r} = 1` (a 3×3 convolution is this rule on the pixel grid);
    ``root_weight=False`` drops :math:`W_0 h_i` (use when the self-loop is itself a relation).
    ``num_bases=B`` shares parameters across relations by basis decomposition, eq. 3:
    :math:`W_r = \sum_b a_{rb} V_b`; ``None`` keeps one full matrix per relation.
    Edges run from ``edge_index[0]`` (source j) to ``edge_index[1]`` (target i).

    The rule is computed aggregate-first: one sparse (CSR) product gives the per-relation neighbour
    means :math:`m_{i,r}`, which are laid side by side and multiplied once by
    :math:`[W_1; \dots; W_R]`, plus :math:`h_i W_0`. Same arithmetic as a loop over relations,
    one large product instead of R small ones and no per-relation masking. The sparse matrix and
    its transpose (the gradient's product) depend on the graph alone: they are built once per
    graph and kept for the next layers and epochs (:func:`mean_operator`). ``self.conv``
    (torch-geometric's ``RGCNConv``) holds the parameters, so initialisation and saved weights
    are its. Continuous edge features (``edge_attr``) are ignored; ``gated_relational`` reads them.
    """

    def __init__(self, in_dim: int, out_dim: int, num_relations: int, num_bases: int | None = None,
                 aggr: str = "mean", root_weight: bool = True, bias: bool = True,
                 edge_dim: int = 0) -> None:
        super().__init__()
        if aggr not in AGGREGATIONS:
            raise LayerOptionError(f"config key model.layer_options.aggr={aggr!r}: relational "
                                   f"layer: aggr must be one of {AGGREGATIONS}")
        if num_bases is not None and not 1 <= num_bases:
            raise LayerOptionError(f"config key model.layer_options.num_bases={num_bases!r}: "
                                   f"relational layer: num_bases must be null or >= 1")
        self.in_dim, self.out_dim, self.num_relations = in_dim, out_dim, num_relations
        self.aggr = aggr
        self.conv = RGCNConv(in_dim, out_dim, num_relations, num_bases=num_bases, aggr=aggr,
                             root_weight=root_weight, bias=bias)

    def forward(self, x: Tensor, edge_index: Tensor, edge_type: Tensor,
                edge_attr: Tensor | None = None) -> Tensor:
        check_graph_inputs("relational layer", x, edge_index, edge_type, self.in_dim,
                           self.num_relations)
        return self.propagate(x, edge_index, edge_type)

    def propagate(self, x: Tensor, edge_index: Tensor, edge_type: Tensor,
                  edge_weight: Tensor | None = None) -> Tensor:
        """Eq. 2 on checked inputs; ``edge_weight`` (E,) scales each message W_r h_j inside the
        sum (the normaliser c_{i,r} still counts edges), which is how a gated variant reuses it.
        Weighted sums go through ``index_add`` (their values change with every step)."""
        n, relations = x.shape[0], self.num_relations
        if edge_weight is None:
            operator = mean_operator(edge_index, edge_type, n, relations, self.aggr)
            gathered = _SparseProduct.apply(x, operator)        # row (i, r): m_{i,r}
        else:
            slot = edge_index[1] * relations + edge_type     # (target i, relation r) of each edge
            counts = torch.bincount(slot, minlength=n * relations)
            messages = x.index_select(0, edge_index[0]) * edge_weight.unsqueeze(1)
            gathered = x.new_zeros(n * relations, x.shape[1]).index_add_(0, slot, messages)
            if self.aggr == "mean":
                gathered = gathered / counts.clamp(min=1).unsqueeze(1).to(x.dtype)
        weights = self._relation_weights().reshape(relations * self.in_dim, self.out_dim)
        out = gathered.view(n, relations * self.in_dim) @ weights
        if self.conv.root is not None:
            out = out + x @ self.conv.root
        return out + self.conv.bias if self.conv.bias is not None else out

    def _relation_weights(self) -> Tensor:
        """W_r for every relation, (R, in, out); eq. 3 when bases are shared."""
        if self.conv.num_bases is None:
            return self.conv.weight
        return torch.einsum("rb,bio->rio", self.conv.comp, self.conv.weight)


class _SparseProduct(torch.autograd.Function):
    """A @ x with A constant: the gradient is A^T @ grad. A compiled CSR product
    (:func:`csr_product`), with the transpose built once: SciPy's product costs half of
    torch's CSR product and its backward on one core, the compiled one about 0.6 of SciPy's."""

    @staticmethod
    def forward(ctx, x: Tensor, operator: tuple[csr_matrix, csr_matrix]) -> Tensor:
        ctx.transposed = operator[1]
        return torch.from_numpy(csr_product(operator[0], x.detach().numpy()))

    @staticmethod
    def backward(ctx, grad: Tensor) -> tuple[Tensor, None]:
        return torch.from_numpy(csr_product(ctx.transposed, grad.numpy())), None


_PARALLEL_FROM = 4096   # nonzeros; below, handing blocks to threads costs more than it saves
_pools: dict[int, ThreadPoolExecutor] = {}


def csr_product(matrix: csr_matrix, dense: np.ndarray) -> np.ndarray:
    """``matrix @ dense`` (SciPy's result bit for bit, :mod:`dochar.models.csr_kernel`), in
    row blocks of equal nonzeros on torch's thread count: the kernel is single-threaded,
    releases the GIL and computes every row on its own, so the blocks give the one product's
    result on any number of threads."""
    from dochar.models.csr_kernel import csr_rows_times_dense   # Numba loads on first use

    rows = matrix.shape[0]
    out = np.empty((rows, dense.shape[1]), dtype=np.result_type(matrix.dtype, dense.dtype))
    operands = (matrix.indptr, matrix.indices, matrix.data, dense.astype(out.dtype, copy=False))
    threads = torch.get_num_threads()
    if threads < 2 or matrix.nnz < _PARALLEL_FROM:
        csr_rows_times_dense(*operands, 0, rows, out)
        return out
    cuts = np.searchsorted(matrix.indptr, np.linspace(0, matrix.nnz, threads + 1)[1:-1])
    bounds = [0, *np.minimum(cuts, rows).tolist(), rows]

    def fill(block: int) -> None:
        low, high = bounds[block], bounds[block + 1]
        csr_rows_times_dense(*operands, low, high, out[low:high])

    pool = _pools.get(threads) or _pools.setdefault(threads, ThreadPoolExecutor(threads))
    list(pool.map(fill, range(threads)))
    return out


_KEPT_OPERATORS = 256   # graphs whose operators are kept: every batch of an epoch and then some
_operators: OrderedDict[tuple, tuple] = OrderedDict()


def mean_operator(edge_index: Tensor, edge_type: Tensor, nodes: int, relations: int,
                  aggr: str) -> tuple[csr_matrix, csr_matrix]:
    """A (rows (i, r) x nodes j; entries 1/c_{i,r}, or 1 for ``add``) and its transpose, as
    SciPy CSR. Kept by the identity and version of the edge tensors: a training batch or the
    validation set meets the same tensors on every layer and, built once, on every epoch."""
    key = (id(edge_index), id(edge_type), edge_index._version, edge_type._version, nodes,
           relations, aggr)
    kept = _operators.get(key)
    if kept is not None and kept[0]() is edge_index and kept[1]() is edge_type:
        _operators.move_to_end(key)
        return kept[2]
    slot = (edge_index[1] * relations + edge_type).numpy()   # (target i, relation r) of each edge
    counts = np.bincount(slot, minlength=nodes * relations)
    values = 1.0 / counts[slot] if aggr == "mean" else np.ones(len(slot))
    forward = csr_matrix((values.astype(np.float32), (slot, edge_index[0].numpy())),
                         shape=(nodes * relations, nodes))
    operator = (forward, forward.T.tocsr())
    _operators[key] = (weakref.ref(edge_index), weakref.ref(edge_type), operator)
    if len(_operators) > _KEPT_OPERATORS:
        _operators.popitem(last=False)
    return operator
