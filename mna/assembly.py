"""Residual and Jacobian of Newton's equations, assembled with few array operations.

One :class:`Assembly` belongs to one run (it lives on the run's
:class:`mna.solver.Factorizer`). It splits ``alpha*q(x) + history + f(x, t)``
into

- a linear part: ``alpha*C + G``, the piecewise-linear batches (switches)
  in their present states, and any extra diagonal (a DC leak). It is summed
  once and kept until the states, ``alpha`` or the diagonal change: a dense
  column-major array for small systems (at most
  :data:`mna.system.DENSE_LIMIT` unknowns), CSC data on the system's shared
  pattern otherwise;
- the nonlinear batches (junctions, saturating chokes, machines), evaluated
  at every iterate and scattered with one ``bincount`` per quantity.

A piecewise-linear batch is affine in x with coefficients that change only
at events (item 6 of the :class:`~mna.elements.base.NonlinearBatch`
protocol), so between events it costs nothing per iteration: its Jacobian is
folded into the linear matrix and its value at x = 0 into a constant offset.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .system import System

#: A kept Jacobian counts as stale once a nonlinear entry has moved by more
#: than this fraction of its own value plus its batch's ``jacobian_floor``
#: (about the contraction rate a chord iteration with it would have).
STALE_FRACTION = 0.3


@dataclass(frozen=True)
class LinearPart:
    """The linear part of one solve: ``alpha*C + G`` + piecewise-linear batches (+ diagonal).

    ``matrix`` is a dense column-major array (small systems) or CSC data;
    ``operator`` multiplies with ``@``; ``offset`` is ``f0 + alpha*q0`` of
    the piecewise-linear batches at x = 0 (SI units of each row), or None.
    ``key`` names everything it depends on.
    """

    key: tuple
    matrix: np.ndarray
    operator: object
    offset: np.ndarray | None


class Assembly:
    """Residuals and Jacobians of Newton's equations for one run of ``system``."""

    def __init__(self, system: System):
        self.system = system
        self.dense = system.dense
        n = system.n
        self.n = n
        slots = system.batches
        self.pwl = [k for k, slot in enumerate(slots) if slot.batch.piecewise_linear]
        self.active = [k for k, slot in enumerate(slots) if not slot.batch.piecewise_linear]
        self.batches = [slots[k].batch for k in self.active]
        flat = system.dense_flat if self.dense else None

        def place(pos):
            return flat[pos] if flat is not None else pos

        self.f_rows = [np.asarray(slots[k].batch.f_rows, dtype=np.int64) for k in self.active]
        self.q_rows = [np.asarray(slots[k].batch.q_rows, dtype=np.int64) for k in self.active]
        self.jf_at = [place(slots[k].jf_pos) for k in self.active]
        self.jq_at = [place(slots[k].jq_pos) for k in self.active]
        self.jf_rows = [np.asarray(slots[k].batch.jf_rows, dtype=np.int64) for k in self.active]
        self.jq_rows = [np.asarray(slots[k].batch.jq_rows, dtype=np.int64) for k in self.active]
        self.charges = any(r.size for r in self.q_rows)
        #: Every batch is piecewise linear: one solve per step, no Newton iterations.
        self.piecewise_linear = system.is_piecewise_linear
        self.size = n * n if self.dense else system.indices.size
        self._floors: dict = {}
        self._states = None
        self._pwl_parts: dict = {}
        self._linear: LinearPart | None = None

    # -- the linear part ----------------------------------------------------------
    def linear(self, states, t: float, alpha: float, extra_diag: np.ndarray | None) -> LinearPart:
        """The linear part for these discrete states, ``alpha`` and diagonal (cached)."""
        if states is not self._states:
            self._states, self._pwl_parts, self._linear = states, {}, None
        state_key = states.key() if (states is not None and self.pwl) else None
        key = (state_key, alpha, None if extra_diag is None else extra_diag.tobytes())
        lin = self._linear
        if lin is not None and lin.key == key:
            return lin
        system = self.system
        data = system.G_data + alpha * system.C_data if alpha else system.G_data.copy()
        offset = None
        if self.pwl:
            jf, jq, f0, q0 = self._piecewise_linear(state_key, t, states)
            data += jf
            if alpha:
                data += alpha * jq
            offset = f0 + alpha * q0 if alpha else f0
        if extra_diag is not None:
            data[system.diag_pos] += extra_diag
        if self.dense:
            matrix = system.dense_array(data)
            lin = LinearPart(key, matrix, matrix, offset)
        else:
            lin = LinearPart(key, data, system.matrix(data), offset)
        self._linear = lin
        return lin

    def _piecewise_linear(self, state_key, t: float, states):
        """CSC data of the piecewise-linear batches' df/dx and dq/dx, and f, q at x = 0."""
        parts = self._pwl_parts.get(state_key)
        if parts is None:
            system = self.system
            n, nnz = system.n, system.indices.size
            jf, jq, f0, q0 = np.zeros(nnz), np.zeros(nnz), np.zeros(n), np.zeros(n)
            zero = np.zeros(n)
            for k in self.pwl:
                slot = system.batches[k]
                state = states[k] if states is not None else None
                fv, jfv, qv, jqv = (slot.batch.evaluate(zero, t) if state is None
                                    else slot.batch.evaluate(zero, t, state))
                batch = slot.batch
                if np.size(fv):
                    f0 += np.bincount(np.asarray(batch.f_rows, dtype=np.int64), fv, minlength=n)
                if np.size(qv):
                    q0 += np.bincount(np.asarray(batch.q_rows, dtype=np.int64), qv, minlength=n)
                if np.size(jfv):
                    jf += np.bincount(slot.jf_pos, jfv, minlength=nnz)
                if np.size(jqv):
                    jq += np.bincount(slot.jq_pos, jqv, minlength=nnz)
            if len(self._pwl_parts) >= 16:
                self._pwl_parts.pop(next(iter(self._pwl_parts)))
            parts = self._pwl_parts[state_key] = (jf, jq, f0, q0)
        return parts

    # -- the nonlinear batches -------------------------------------------------------
    def residual(self, lin: LinearPart, x: np.ndarray, t: float, states, alpha: float):
        """``lin @ x + f_nl(x) + alpha*q_nl(x)`` and the batches' Jacobian values at x.

        The constant terms (sources, history, offset) are the caller's.
        """
        r = lin.operator.dot(x)
        values = []
        n = self.n
        for k, batch, f_rows, q_rows in zip(self.active, self.batches, self.f_rows, self.q_rows):
            state = states[k] if states is not None else None
            fv, jfv, qv, jqv = batch.evaluate(x, t) if state is None else batch.evaluate(x, t, state)
            if f_rows.size:
                r += np.bincount(f_rows, fv, minlength=n)
            if alpha and q_rows.size:
                r += alpha * np.bincount(q_rows, qv, minlength=n)
            values.append((jfv, jqv))
        return r, values

    def jacobian(self, lin: LinearPart, values, alpha: float):
        """``lin + df_nl/dx + alpha*dq_nl/dx`` (a new dense array, or new CSC data), and
        the staleness bound of its nonlinear entries (see :meth:`close`)."""
        at, weights = self._entries(values, alpha)
        if at is None:
            matrix = lin.matrix.copy(order="F") if self.dense else lin.matrix.copy()
            return matrix, None
        nl = np.bincount(at, weights, minlength=self.size)
        matrix = lin.matrix + (nl.reshape((self.n, self.n), order="F") if self.dense else nl)
        # An entry may drift by STALE_FRACTION of itself plus its batch's floor
        # (the linear conductance always in parallel with a junction).
        bound = (np.abs(weights) + self._entry_floor(alpha)) * STALE_FRACTION
        return matrix, (weights, bound)

    def close(self, values, alpha: float, reference) -> bool:
        """Whether the nonlinear Jacobian entries at ``values`` are within the bound
        of those a Jacobian was made from (``reference`` from :meth:`jacobian`)."""
        if reference is None:
            return True
        _, weights = self._entries(values, alpha)
        return bool((np.abs(weights - reference[0]) <= reference[1]).all())

    def _entries(self, values, alpha: float):
        """Positions and values of every nonlinear Jacobian entry, in one order."""
        parts, weights = [], []
        for jf_at, jq_at, (jfv, jqv) in zip(self.jf_at, self.jq_at, values):
            if jf_at.size:
                parts.append(jf_at)
                weights.append(jfv)
            if alpha and jq_at.size:
                parts.append(jq_at)
                weights.append(alpha * np.asarray(jqv, dtype=float))
        if not parts:
            return None, None
        if len(parts) == 1:
            return parts[0], np.asarray(weights[0], dtype=float)
        return np.concatenate(parts), np.concatenate(weights)

    def _entry_floor(self, alpha: float) -> np.ndarray:
        """Each nonlinear entry's ``jacobian_floor`` (its batch's), in :meth:`_entries` order."""
        floor = self._floors.get(bool(alpha))
        if floor is None:
            parts = []
            for batch, jf_rows, jq_rows in zip(self.batches, self.jf_rows, self.jq_rows):
                parts.append(np.full(jf_rows.size, float(batch.jacobian_floor)))
                if alpha:
                    parts.append(np.zeros(jq_rows.size))
            floor = self._floors[bool(alpha)] = np.concatenate(parts) if parts else np.empty(0)
        return floor
