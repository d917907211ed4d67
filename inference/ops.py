"""The PyTensor bridge to the solution layer: predicted concentrations with their exact Jacobian.

One Op application returns both the predictions at every measurement and their Jacobian with respect to
its inputs; its gradient reuses that Jacobian (PyTensor merges the two uses into one solve), so a log-density
with its gradient costs one integration with forward sensitivities.
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
import pytensor.tensor as pt
from pytensor.graph.basic import Apply
from pytensor.graph.op import Op

from .data import Observations
from .solution import MeasurementSolver, NetworkSolver, SolverFailure


class NetworkPrediction(Op):
    """Inputs: ln_k (runs, reactions), ln_eq (runs, reversible), free orders (F,), free initial (runs, G).
    Outputs: predicted concentration per measurement (M,), and d(prediction)/d(inputs, flattened) (M, P).

    A failed integration returns NaN predictions (the model turns them into a log-density of -inf), is
    counted, and, with ``failure_log``, appended to that file as one line."""

    __props__ = ()

    def __init__(
        self,
        solver: NetworkSolver,
        observations: Observations,
        fixed_orders: np.ndarray,
        failure_log: Path | None = None,
    ) -> None:
        self.solver = solver
        self.failure_log = failure_log
        self.last_failure = ""
        self.observations = observations
        self.fixed_orders = np.array(fixed_orders, dtype=float)
        self.failures = 0
        n_runs = len(observations.run_ids)
        n_reactions = len(solver.network.reactions)
        n_rev = solver.reversible_index.size
        n_orders, n_initial = len(solver.free_orders), len(solver.free_initial)
        self.shapes = ((n_runs, n_reactions), (n_runs, n_rev), (n_orders,), (n_runs, n_initial))
        self.sizes = [int(np.prod(s)) for s in self.shapes]
        columns = self._jacobian_columns(n_runs, n_reactions, n_rev, n_orders, n_initial)
        self.measurements = MeasurementSolver(
            solver,
            observations.run_index,
            observations.time_index,
            observations.species_index,
            columns,
            sum(self.sizes),
        )

    def __hash__(self) -> int:
        return id(self)

    def __eq__(self, other: object) -> bool:
        return self is other

    @staticmethod
    def _jacobian_columns(n_runs: int, n_reactions: int, n_rev: int, n_orders: int, n_initial: int) -> np.ndarray:
        """columns[r, p]: the flattened input that sensitivity parameter p of run r belongs to."""
        offset_eq = n_runs * n_reactions
        offset_orders = offset_eq + n_runs * n_rev
        offset_initial = offset_orders + n_orders
        columns = np.zeros((n_runs, n_reactions + n_rev + n_orders + n_initial), dtype=int)
        for r in range(n_runs):
            columns[r, :n_reactions] = r * n_reactions + np.arange(n_reactions)
            columns[r, n_reactions : n_reactions + n_rev] = offset_eq + r * n_rev + np.arange(n_rev)
            columns[r, n_reactions + n_rev : n_reactions + n_rev + n_orders] = offset_orders + np.arange(n_orders)
            columns[r, n_reactions + n_rev + n_orders :] = offset_initial + r * n_initial + np.arange(n_initial)
        return columns

    def make_node(self, ln_k, ln_eq, orders, initial) -> Apply:
        inputs = [pt.as_tensor_variable(x).astype("float64") for x in (ln_k, ln_eq, orders, initial)]
        outputs = [pt.dvector(), pt.dmatrix()]
        return Apply(self, inputs, outputs)

    def full_orders(self, free_orders: np.ndarray) -> np.ndarray:
        orders = self.fixed_orders.copy()
        for value, (j, i) in zip(free_orders, self.solver.free_orders, strict=True):
            orders[j, i] = value
        return orders

    def full_initial(self, free_initial: np.ndarray) -> np.ndarray:
        initial = self.observations.initial.copy()
        for g, i in enumerate(self.solver.free_initial):
            initial[:, i] = free_initial[:, g]
        return initial

    def perform(self, node: Apply, inputs: list, outputs: list) -> None:
        ln_k, ln_eq, free_orders, free_initial = inputs
        obs = self.observations
        n_total = sum(self.sizes)
        try:
            prediction, jacobian = self.measurements.solve(
                ln_k, ln_eq, self.full_orders(free_orders), self.full_initial(free_initial)
            )
        except SolverFailure as failure:
            self.failures += 1
            self.last_failure = str(failure)
            if self.failure_log is not None:
                # Chains run in other processes; a line per failure lets the parent count them all.
                with self.failure_log.open("a") as log:
                    log.write(f"{os.getpid()}\n")
            prediction = np.full(obs.value.size, np.nan)
            jacobian = np.zeros((obs.value.size, n_total))
        outputs[0][0] = prediction
        outputs[1][0] = jacobian

    def grad(self, inputs: list, output_grads: list) -> list:
        _, jacobian = self(*inputs)
        flat = pt.dot(output_grads[0], jacobian)
        grads, start = [], 0
        for variable, size, shape in zip(inputs, self.sizes, self.shapes, strict=True):
            grads.append(flat[start : start + size].reshape(shape).astype(variable.dtype))
            start += size
        return grads
