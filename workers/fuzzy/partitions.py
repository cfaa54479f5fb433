"""Fuzzy partitions: uniform triangular labels, crisp nominal items, lateral tuning.

Every numeric variable gets ``labels`` triangular linguistic terms, uniformly
spaced over the range the variable takes *in the training part* (never the
test part): the centres are ``lo + i * step`` with ``step = (hi - lo) /
(labels - 1)`` and each triangle reaches the neighbouring centres, so the
memberships of a value sum to one (a strong partition). Every nominal
variable contributes one crisp item per category seen in the training part
(membership 1 for that category code, 0 otherwise); crisp items are never
tuned.

An *item* is one (variable, label) pair; items are numbered numeric first
(variable-major, label-minor), then the crisp items. The memberships of all
examples in all items form one ``(n_items + 1, n_examples)`` matrix; the
extra last row is all ones and pads rules with fewer antecedents than the
maximum, so that a rule's matching degree is always the product of
``depth`` gathered rows.

Lateral tuning (2-tuple representation, Alcalá, Alcalá-Fdez, Herrera 2007):
a displacement ``alpha`` in [-0.5, 0.5) moves the whole triangle of a label
by ``alpha * step`` (the distance between neighbouring centres), keeping its
shape. Choices left open by the method, documented here:

* values outside the training range (test examples) are clipped to it
  before the memberships, so that a test value beyond the extremes matches
  the extreme labels as the extreme training values do;
* a constant training column gets ``step = 1`` (its values all sit on the
  first label's centre).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

_NAMES = {
    2: ("low", "high"),
    3: ("low", "medium", "high"),
    4: ("very_low", "low", "high", "very_high"),
    5: ("very_low", "low", "medium", "high", "very_high"),
    6: ("very_low", "low", "medium_low", "medium_high", "high", "very_high"),
    7: ("extremely_low", "very_low", "low", "medium", "high", "very_high", "extremely_high"),
}


def label_names(labels: int) -> tuple[str, ...]:
    """Linguistic names for ``labels`` uniformly spaced terms (``label_0``... beyond seven)."""
    return _NAMES.get(labels, tuple(f"label_{i}" for i in range(labels)))


@dataclass(frozen=True)
class FuzzyPartition:
    """The data base: labels of the numeric variables and crisp items of the nominal ones.

    Attributes
    ----------
    labels : int
        Linguistic terms per numeric variable.
    numeric : ndarray of int
        Indices of the numeric variables.
    lo, step : ndarray of float
        Per numeric variable: training minimum and distance between centres.
    hi : ndarray of float
        Per numeric variable: training maximum (test values are clipped to [lo, hi]).
    item_var : ndarray of int
        Per item, the variable (column of X) it belongs to.
    item_label : ndarray of int
        Per item, the label index (numeric) or the category code (nominal).
    n_numeric_items : int
        Items ``0 .. n_numeric_items - 1`` are fuzzy and tunable; the rest are crisp.
    """

    labels: int
    numeric: np.ndarray
    lo: np.ndarray
    hi: np.ndarray
    step: np.ndarray
    item_var: np.ndarray
    item_label: np.ndarray
    n_numeric_items: int

    @property
    def n_items(self) -> int:
        """Number of items (the padding row not counted)."""
        return len(self.item_var)

    @property
    def pad(self) -> int:
        """Index of the all-ones padding row in the membership matrix."""
        return len(self.item_var)

    def centres(self, displacement: np.ndarray | None = None) -> np.ndarray:
        """Label centres ``(n_numeric, labels)`` in data units, after an optional displacement."""
        base = np.arange(self.labels)[None, :] * self.step[:, None] + self.lo[:, None]
        if displacement is None:
            return base
        return base + displacement.reshape(len(self.numeric), self.labels) * self.step[:, None]


def build_partition(X: np.ndarray, nominal: np.ndarray, labels: int) -> FuzzyPartition:
    """Build the uniform partition from the training part ``X`` (nominal columns as category codes)."""
    numeric = np.flatnonzero(~nominal)
    lo = X[:, numeric].min(axis=0) if len(numeric) else np.zeros(0)
    hi = X[:, numeric].max(axis=0) if len(numeric) else np.zeros(0)
    span = hi - lo
    step = np.where(span > 0, span / (labels - 1), 1.0)
    item_var = [np.repeat(numeric, labels)]
    item_label = [np.tile(np.arange(labels), len(numeric))]
    for j in np.flatnonzero(nominal):
        codes = np.unique(X[:, j]).astype(int)
        item_var.append(np.full(len(codes), j))
        item_label.append(codes)
    return FuzzyPartition(labels=labels, numeric=numeric, lo=lo, hi=hi, step=step,
                          item_var=np.concatenate(item_var).astype(np.intp),
                          item_label=np.concatenate(item_label).astype(np.intp),
                          n_numeric_items=len(numeric) * labels)


class MembershipCache:
    """Memberships of fixed examples, computed fast for any lateral displacement.

    The examples' positions relative to every base label centre, in units of
    ``step``, are computed once; a displacement then costs one subtraction, an
    absolute value and a clip on an ``(n_numeric_items, n_examples)`` array.
    The matrices of the most recent displacements are kept (keyed by their
    bytes), so that chromosomes whose real part is unchanged reuse them.

    Parameters
    ----------
    partition : FuzzyPartition
    X : ndarray of shape (n_examples, n_features)
    keep : int, default=8
        How many recent displacement vectors to remember.
    items : ndarray of int, optional
        Compute only these items' rows (increasing), e.g. those a rule base
        uses; row ``k`` of the matrix is then item ``items[k]``.
    """

    def __init__(self, partition: FuzzyPartition, X: np.ndarray, keep: int = 8,
                 items: np.ndarray | None = None) -> None:
        self.partition = partition
        p = partition
        #: the items (rows) computed, in this order, then the padding row
        self.items = np.arange(p.n_items) if items is None else np.asarray(items, dtype=np.intp)
        num = self.items[self.items < p.n_numeric_items]
        self._num_items = num
        self._n_num = len(num)
        Xc = np.clip(X[:, p.numeric], p.lo, p.hi) if len(p.numeric) else X[:, :0]
        pos = np.searchsorted(p.numeric, p.item_var[num])
        centre = p.lo[pos] + p.item_label[num] * p.step[pos]
        #: (n_numeric rows, n_examples): (x - base centre) / step
        self._z = (Xc[:, pos].T - centre[:, None]) / p.step[pos][:, None]
        crisp_items = self.items[self.items >= p.n_numeric_items]
        crisp = X[:, p.item_var[crisp_items]].T == p.item_label[crisp_items][:, None]
        self._matrix = np.ones((len(self.items) + 1, X.shape[0]))
        self._matrix[self._n_num: len(self.items)] = crisp
        if not np.all(np.diff(self.items) > 0):
            raise ValueError("MembershipCache: items must be strictly increasing")
        self._keep = keep
        self._recent: dict[bytes, np.ndarray] = {}
        self.hits = 0
        self.misses = 0

    def __call__(self, displacement: np.ndarray | None = None) -> np.ndarray:
        """The ``(len(items) + 1, n_examples)`` membership matrix (do not modify it).

        ``displacement`` has one entry per numeric item of the partition (all
        of them, whichever rows this cache computes).
        """
        if displacement is None:
            displacement = np.zeros(self.partition.n_numeric_items)
        key = displacement.tobytes()
        found = self._recent.get(key)
        if found is not None:
            self.hits += 1
            return found
        self.misses += 1
        out = np.empty_like(self._matrix)
        out[self._n_num:] = self._matrix[self._n_num:]  # crisp rows and padding never change
        head = out[: self._n_num]
        np.subtract(self._z, displacement[self._num_items][:, None], out=head)
        np.abs(head, out=head)
        np.subtract(1.0, head, out=head)
        np.maximum(head, 0.0, out=head)
        if len(self._recent) >= self._keep:
            self._recent.pop(next(iter(self._recent)))
        self._recent[key] = out
        return out

    def rows(self, displacement: np.ndarray, rows: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Only the membership rows that ``rows`` use, for one displacement (no caching).

        ``rows`` holds row numbers of the full matrix (``len(items)`` is the
        padding row), in any shape, e.g. a rule base's antecedents. Returns
        the compact matrix of the distinct rows used (increasing, the padding
        row last) and ``rows`` renumbered into it. Each entry is computed by
        the same operations as in :meth:`__call__`, so the values are
        bit-for-bit those of the full matrix; but a rule base that uses few
        items costs only their rows.
        """
        pad = len(self.items)
        mark = np.zeros(pad + 1, dtype=bool)
        mark[rows] = True
        mark[pad] = True
        need = np.flatnonzero(mark)
        where = np.empty(pad + 1, dtype=np.intp)
        where[need] = np.arange(len(need))
        num = need[need < self._n_num]
        out = np.empty((len(need), self._matrix.shape[1]))
        head = out[: len(num)]
        np.take(self._z, num, axis=0, out=head)
        np.subtract(head, displacement[self._num_items[num]][:, None], out=head)
        np.abs(head, out=head)
        np.subtract(1.0, head, out=head)
        np.maximum(head, 0.0, out=head)
        out[len(num):] = self._matrix[need[len(num):]]  # crisp rows and padding never change
        return out, where[rows]


def memberships(partition: FuzzyPartition, X: np.ndarray,
                displacement: np.ndarray | None = None) -> np.ndarray:
    """Membership matrix ``(n_items + 1, n_examples)`` of ``X`` (last row: padding ones)."""
    return MembershipCache(partition, X, keep=1)(displacement)
