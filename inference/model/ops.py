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

from ..inputs.data import Observations
from ..physics.solution import MeasurementSolver, NetworkSolver, SolverFailure


class NetworkPrediction(Op):
    """Inputs: ln_k (runs, reactions), ln_eq (runs, reversible), ln_ads (runs, adsorption sites), free orders
    (F,), free initial (runs, G). Outputs: predicted concentration per measurement (M,), and
    d(prediction)/d(inputs, flattened) (M, P).

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
        # (count, per run) of each input, in the order of the solver's sensitivity parameters.
        blocks = (
            (len(solver.network.reactions), True),
            (solver.reversible_index.size, True),
            (len(solver.network.adsorption_sites), True),
            (len(solver.free_orders), False),
            (len(solver.free_initial), True),
        )
        self.shapes = tuple((n_runs, count) if per_run else (count,) for count, per_run in blocks)
        self.sizes = [int(np.prod(s)) for s in self.shapes]
        self.measurements = MeasurementSolver(
            solver,
            observations.run_index,
            observations.time_index,
            observations.species_index,
            self._jacobian_columns(n_runs, blocks),
            sum(self.sizes),
        )

    def __hash__(self) -> int:
        return id(self)

    def __eq__(self, other: object) -> bool:
        return self is other

    @staticmethod
    def _jacobian_columns(n_runs: int, blocks: tuple[tuple[int, bool], ...]) -> np.ndarray:
        """columns[r, p]: the flattened input that sensitivity parameter p of run r belongs to."""
        columns = np.zeros((n_runs, sum(count for count, _ in blocks)), dtype=int)
        offset, first = 0, 0
        for count, per_run in blocks:
            for r in range(n_runs):
                columns[r, first : first + count] = offset + (r * count if per_run else 0) + np.arange(count)
            offset += count * (n_runs if per_run else 1)
            first += count
        return columns

    def make_node(self, ln_k, ln_eq, ln_ads, orders, initial) -> Apply:
        inputs = [pt.as_tensor_variable(x).astype("float64") for x in (ln_k, ln_eq, ln_ads, orders, initial)]
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
        ln_k, ln_eq, ln_ads, free_orders, free_initial = inputs
        obs = self.observations
        n_total = sum(self.sizes)
        try:
            prediction, jacobian = self.measurements.solve(
                ln_k, ln_eq, self.full_orders(free_orders), self.full_initial(free_initial), ln_ads
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
