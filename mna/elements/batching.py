"""Helpers for nonlinear batches: index patterns with reference nodes dropped.

Every batch in this package fills the :class:`~mna.elements.base.NonlinearBatch`
index arrays with the same few shapes: a branch current ``i(v)`` between two
nodes (a diode junction, a switch), whose residual goes ``+i`` into row
``a`` and ``-i`` into row ``b`` and whose Jacobian is the 2x2 conductance
block. A reference node has index -1; its rows and columns are dropped here,
once, at construction, so evaluating a batch is a few numpy calls with no
Python loop over instances.
"""

from __future__ import annotations

import numpy as np

#: Largest instances x unknowns for which a branch pattern keeps its maps as
#: small dense matrices.
SMALL_MAP = 4096


def node_values(x: np.ndarray, index: np.ndarray) -> np.ndarray:
    """``x[index]`` with 0 where ``index`` is -1 (a reference node)."""
    return np.where(index >= 0, x[np.maximum(index, 0)], 0.0)


class NodeSelector:
    """``x[index]`` with 0 at reference nodes (-1), precomputed for speed.

    Called several times per Newton iteration, so it avoids ``np.where``:
    index -1 picks ``x[-1]``, which a 0/1 mask then zeroes.
    """

    def __init__(self, index: np.ndarray):
        self.index = np.asarray(index, dtype=np.int64)
        self.all_valid = bool(np.all(self.index >= 0))
        self.none_valid = bool(np.all(self.index < 0))
        self.mask = (self.index >= 0).astype(float)

    def __call__(self, x: np.ndarray) -> np.ndarray:
        if self.all_valid:
            return x[self.index]
        if self.none_valid:
            return np.zeros(self.index.size)
        return x[self.index] * self.mask


class BranchPattern:
    """Residual rows and Jacobian pattern of branch currents ``i(v_a - v_b)``.

    ``a`` and ``b`` are integer arrays of node indices (-1 for a reference
    node), one entry per instance. ``f_values(i)`` and ``jf_values(g)`` turn
    per-instance currents (A) and conductances (S) into the value arrays the
    engine expects for ``f_rows`` and ``(jf_rows, jf_cols)``.
    """

    def __init__(self, a: np.ndarray, b: np.ndarray, n: int | None = None):
        self.a = np.asarray(a, dtype=np.int64)
        self.b = np.asarray(b, dtype=np.int64)
        self._va, self._vb = NodeSelector(self.a), NodeSelector(self.b)
        m = self.a.size
        inst = np.arange(m)
        # Residual: +i at row a, -i at row b, reference rows dropped.
        rows = np.concatenate([self.a, self.b])
        keep = rows >= 0
        self.f_rows = rows[keep]
        self._f_pick = np.concatenate([inst, inst])[keep]
        self._f_sign = np.concatenate([np.ones(m), -np.ones(m)])[keep]
        # Jacobian: the block [[g, -g], [-g, g]] on (a, b) x (a, b).
        jr = np.concatenate([self.a, self.a, self.b, self.b])
        jc = np.concatenate([self.a, self.b, self.a, self.b])
        keep = (jr >= 0) & (jc >= 0)
        self.jf_rows = jr[keep]
        self.jf_cols = jc[keep]
        self._j_pick = np.concatenate([inst, inst, inst, inst])[keep]
        self._j_sign = np.concatenate([np.ones(m), -np.ones(m), -np.ones(m), np.ones(m)])[keep]
        # Few instances in a small system (``n`` unknowns given): each of the
        # three maps is one small matrix product instead of two or three
        # indexing calls (for arrays this small, numpy's cost is per call).
        self._across = self._f_map = self._j_map = None
        if n is not None and m * max(n, self.jf_rows.size) <= SMALL_MAP:
            self._across = np.zeros((m, n))
            self._across[inst[self.a >= 0], self.a[self.a >= 0]] += 1.0
            self._across[inst[self.b >= 0], self.b[self.b >= 0]] -= 1.0
            self._f_map = np.zeros((self.f_rows.size, m))
            self._f_map[np.arange(self.f_rows.size), self._f_pick] = self._f_sign
            self._j_map = np.zeros((self.jf_rows.size, m))
            self._j_map[np.arange(self.jf_rows.size), self._j_pick] = self._j_sign

    def across(self, x: np.ndarray) -> np.ndarray:
        """``v_a - v_b`` per instance."""
        if self._across is not None:
            return self._across.dot(x)
        return self._va(x) - self._vb(x)

    def f_values(self, current: np.ndarray) -> np.ndarray:
        """Residual values: ``+i`` at row a, ``-i`` at row b."""
        if self._f_map is not None:
            return self._f_map.dot(current)
        return current[self._f_pick] * self._f_sign

    def jf_values(self, conductance: np.ndarray) -> np.ndarray:
        """Jacobian values of the 2x2 block ``[[g, -g], [-g, g]]``."""
        if self._j_map is not None:
            return self._j_map.dot(conductance)
        return conductance[self._j_pick] * self._j_sign


def states_from_log(probe, element) -> np.ndarray:
    """An element's discrete state (1.0 or 0.0) at each recorded time, from the run's log.

    The first of two samples at one time (a state change there) is the one
    before the change.
    """
    time = np.asarray(probe.time, dtype=float)
    log_t, log_s = probe.state_log(element)
    if log_t.size == 0:
        return np.zeros_like(time)
    k = np.searchsorted(log_t, time, side="right") - 1
    first_of_pair = np.zeros(time.size, dtype=bool)
    first_of_pair[:-1] = time[1:] == time[:-1]
    before = np.searchsorted(log_t, time, side="left") - 1
    k = np.where(first_of_pair, before, k)
    return np.where(k >= 0, log_s[np.maximum(k, 0)], log_s[0]).astype(float)
