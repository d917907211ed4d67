"""The PyTensor bridge to the solution layer: predicted concentrations with their exact Jacobian.

One Op application returns both the predictions at every measurement and their Jacobian with respect to
its inputs; its gradient reuses that Jacobian (PyTensor merges the two uses into one solve), so a log-density
with its gradient costs one integration with forward sensitivities.
"""

from __future__ import annotations

import copy
import os
from pathlib import Path

import numpy as np
import pytensor.tensor as pt
from pytensor.graph.basic import Apply
from pytensor.graph.op import Op
from pytensor.graph.rewriting.basic import node_rewriter
from pytensor.tensor.rewriting.basic import register_specialize

from ..inputs.data import Observations
from ..physics.parameters import BLOCKS, KineticInputs
from ..physics.solution import MeasurementSolver, NetworkSolver, SolverFailure
from .memory import RecentPoints

#: Bytes of predictions an Op remembers (``memory.RecentPoints``): every posterior draw of a typical fit, which the
#: pointwise log-likelihood and then the posterior predictive integrate (a study of 1800 values keeps 4444 draws).
REMEMBERED_BYTES = 64 * 2**20


class NetworkPrediction(Op):
    """Inputs: one per block of ``parameters.BLOCKS``, in its order, in the free form of ``KineticInputs``
    (ln_k (runs, reactions), ln_eq (runs, reversible), ln_ads (runs, adsorption sites), fitted orders (F,),
    uncertain initial concentrations (runs, G), and the shared temperature slopes where a run's temperature
    changes). Outputs: predicted concentration per measurement (M,), and
    d(prediction)/d(inputs, flattened) (M, P).

    A failed integration returns NaN predictions (the model turns them into a log-density of -inf), is
    counted, and, with ``failure_log``, appended to that file as one line.

    Where a compiled function uses only the predictions (the pointwise log-likelihood, the posterior
    predictive, a log-density without gradient), the rewrite ``predictions_alone`` puts in a copy that
    integrates the concentrations without their sensitivities and leaves the Jacobian empty (M, 0)."""

    __props__ = ()
    with_jacobian = True

    def __init__(
        self,
        solver: NetworkSolver,
        observations: Observations,
        fixed_orders: np.ndarray,
        failure_log: Path | None = None,
        fixed_exponents: np.ndarray | None = None,
    ) -> None:
        self.solver = solver
        self.failure_log = failure_log
        self.last_failure = ""
        self.observations = observations
        self.fixed_orders = np.array(fixed_orders, dtype=float)
        #: The runs' nominal initial concentrations, a private writable copy (the solver's one compiled signature).
        self.nominal_initial = np.array(observations.initial, dtype=float)
        self.fixed_exponents = fixed_exponents
        self.failures = 0
        n_runs = len(observations.run_ids)
        counts = [block.count(solver.layout) for block in BLOCKS]
        self.shapes = tuple(
            (n_runs, count) if block.per_run else (count,) for block, count in zip(BLOCKS, counts, strict=True)
        )
        self.sizes = [int(np.prod(s)) for s in self.shapes]
        self.measurements = MeasurementSolver(
            solver,
            observations.run_index,
            observations.time_index,
            observations.species_index,
            self._jacobian_columns(n_runs, counts),
            sum(self.sizes),
            observations.factor,
        )
        #: Predictions alone at the inputs met lately, at most ``REMEMBERED_BYTES`` of them.
        self.remembered_predictions = RecentPoints(
            self._predictions_alone, max(1, REMEMBERED_BYTES // (8 * max(1, observations.value.size)))
        )

    def __hash__(self) -> int:
        return id(self)

    def __eq__(self, other: object) -> bool:
        return self is other

    @staticmethod
    def _jacobian_columns(n_runs: int, counts: list[int]) -> np.ndarray:
        """columns[r, p]: the flattened input that sensitivity parameter p of run r belongs to."""
        columns = np.zeros((n_runs, sum(counts)), dtype=int)
        offset, first = 0, 0
        for block, count in zip(BLOCKS, counts, strict=True):
            for r in range(n_runs):
                columns[r, first : first + count] = offset + (r * count if block.per_run else 0) + np.arange(count)
            offset += count * (n_runs if block.per_run else 1)
            first += count
        return columns

    def make_node(self, *inputs) -> Apply:
        if len(inputs) != len(BLOCKS):
            raise TypeError(f"NetworkPrediction takes {len(BLOCKS)} inputs, one per parameter block")
        variables = [pt.as_tensor_variable(x).astype("float64") for x in inputs]
        outputs = [pt.dvector(), pt.dmatrix()]
        return Apply(self, variables, outputs)

    def _solve(self, *inputs: np.ndarray, with_jacobian: bool = True) -> tuple[np.ndarray, np.ndarray]:
        """Predictions and (``with_jacobian``) their Jacobian at the Op's inputs; raises ``SolverFailure``."""
        solver_inputs = self.solver.layout.expand(
            KineticInputs(*inputs), self.fixed_orders, self.nominal_initial, self.fixed_exponents
        )
        return self.measurements.solve(solver_inputs, with_jacobian)

    def _predictions_alone(self, *inputs: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        return self._solve(*inputs, with_jacobian=False)

    def perform(self, node: Apply, inputs: list, outputs: list) -> None:
        obs = self.observations
        n_total = sum(self.sizes)
        try:
            if self.with_jacobian:
                prediction, jacobian = self._solve(*inputs)
            else:  # shared by this Op's copies: the log-likelihood and the predictive meet the same draws
                prediction, jacobian = self.remembered_predictions(*inputs)
        except SolverFailure as failure:
            self.failures += 1
            self.last_failure = str(failure)
            if self.failure_log is not None:
                # Chains run in other processes; a line per failure lets the parent count them all.
                with self.failure_log.open("a") as log:
                    log.write(f"{os.getpid()}\n")
            prediction = np.full(obs.value.size, np.nan)
            jacobian = np.zeros((obs.value.size, n_total if self.with_jacobian else 0))
        outputs[0][0] = prediction
        outputs[1][0] = jacobian

    def without_jacobian(self) -> NetworkPrediction:
        """This Op computing the predictions alone (same solver, observations and failure log)."""
        alone = copy.copy(self)
        alone.with_jacobian = False
        return alone

    def grad(self, inputs: list, output_grads: list) -> list:
        if not self.with_jacobian:
            raise NotImplementedError("the predictions-alone copy of NetworkPrediction has no gradient")
        _, jacobian = self(*inputs)
        flat = pt.dot(output_grads[0], jacobian)
        grads, start = [], 0
        for variable, size, shape in zip(inputs, self.sizes, self.shapes, strict=True):
            grads.append(flat[start : start + size].reshape(shape).astype(variable.dtype))
            start += size
        return grads


@register_specialize
@node_rewriter([NetworkPrediction])
def predictions_alone(fgraph, node):
    """Where nothing reads an application's Jacobian, use the copy of its Op that does not compute it."""
    if not node.op.with_jacobian or fgraph.clients.get(node.outputs[1]):
        return None
    return node.op.without_jacobian()(*node.inputs, return_list=True)
