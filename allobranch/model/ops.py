"""PyTensor operations wrapping the fused junction-likelihood kernels.

Two forms, chosen by :func:`allobranch.model.build.build_model`:

* ``"fast"`` -- measurement error and asymmetry scale fixed: inputs ``a_specimen, sigma_dev, nu`` and the
  precomputed daughter posteriors; analytic derivatives.
* ``"full"`` -- measurement error and asymmetry scale sampled: inputs ``a_specimen, sigma_dev, rel_error,
  sigma_asym, nu`` and the raw data; complex-step derivatives.

The Op returns the summed log-likelihood and its gradient from one kernel call. The Ops run in PyTensor's Python/C mode and
are also registered with PyTensor's numba backend so that nutpie can compile the whole model.
"""

from __future__ import annotations

import numpy as np
import pytensor.tensor as pt
from pytensor.gradient import DisconnectedType
from pytensor.graph.basic import Apply
from pytensor.graph.op import Op

from allobranch.model import kernel

#: Number of parameter inputs (the first inputs) of each form.
N_PARAMS = {"fast": 3, "full": 5}


def _fast_call(student, a_specimen, sdev, nu, y0, mu, g, c, ybar, M, s0sq, lld, specimen_idx):
    return kernel.fast_terms(y0, mu, g, c, ybar, M, s0sq, lld, a_specimen[specimen_idx], sdev, nu, student)


def _full_call(
    student, rel_error_free, a_specimen, sdev, rel_error, sasym, nu, y0, Y, M, V0, V, specimen_idx
):
    skip = np.array([False, False, not rel_error_free, False, not student])
    return kernel.junction_terms(
        y0, Y, M, V0, V, a_specimen[specimen_idx], sdev, rel_error, sasym, nu, student, skip
    )


class JunctionLoglik(Op):
    """Summed junction log-likelihood (scalar) and its gradient (flat vector), in one kernel call.

    The gradient output is ``[d a_specimen..., d scalar parameters...]``; :meth:`grad` scales it by the
    upstream gradient. Per-junction terms are evaluated after sampling by
    :meth:`allobranch.model.build.BuiltModel.pointwise`.
    """

    __props__ = ("kind", "student", "rel_error_free")

    def __init__(self, kind: str, student: bool, rel_error_free: bool = False) -> None:
        if kind not in N_PARAMS:
            raise ValueError(f"kind must be one of {sorted(N_PARAMS)}")
        self.kind = kind
        self.student = bool(student)
        self.rel_error_free = bool(rel_error_free)

    def make_node(self, *inputs):
        inputs = [pt.as_tensor_variable(x) for x in inputs]
        return Apply(self, inputs, [pt.dscalar(), pt.dvector()])

    def perform(self, node, inputs, outputs):
        p = N_PARAMS[self.kind]
        args = [np.asarray(x) for x in inputs]
        params = [args[0]] + [float(x) for x in args[1:p]]
        if self.kind == "fast":
            ll, dll, _, _ = _fast_call(self.student, *params, *args[p:])
        else:
            ll, dll, _, _ = _full_call(self.student, self.rel_error_free, *params, *args[p:])
        da, ds = kernel.aggregate_gradient(np.ones(ll.shape[0]), dll, args[-1], args[0].shape[0])
        outputs[0][0] = np.asarray(ll.sum())
        outputs[1][0] = _flatten(self.kind, da, ds)

    def connection_pattern(self, node):
        p = N_PARAMS[self.kind]
        return [[i < p, False] for i in range(len(node.inputs))]

    def grad(self, inputs, output_grads):
        p = N_PARAMS[self.kind]
        _, flat = self(*inputs)
        flat = flat * output_grads[0]
        n_specimens = inputs[0].shape[0]
        grads = [flat[:n_specimens]] + [flat[n_specimens + i] for i in range(p - 1)]
        return grads + [DisconnectedType()() for _ in inputs[p:]]


def _flatten(kind: str, da: np.ndarray, ds: np.ndarray) -> np.ndarray:
    """Gradient vector of a form's parameters; ``ds`` is ordered (sigma_dev, rel_error, sigma_asym, nu)."""
    if kind == "fast":
        return np.concatenate([da, ds[[0, 3]]])
    return np.concatenate([da, ds])


def _register_numba() -> None:
    """Teach PyTensor's numba backend (used by nutpie) to compile the Ops."""
    try:
        from pytensor.link.numba.dispatch.basic import numba_njit, register_funcify_default_op_cache_key
    except ImportError:  # pragma: no cover - older PyTensor
        return

    @register_funcify_default_op_cache_key(JunctionLoglik)
    def _funcify_loglik(op, node, **kwargs):
        student, rel_error_free = op.student, op.rel_error_free
        if op.kind == "fast":

            @numba_njit
            def fast(a_specimen, sdev, nu, y0, mu, g, c, ybar, M, s0sq, lld, specimen_idx):
                ll, dll, _, _ = kernel.fast_terms(
                    y0,
                    mu,
                    g,
                    c,
                    ybar,
                    M,
                    s0sq,
                    lld,
                    a_specimen[specimen_idx],
                    sdev.item(),
                    nu.item(),
                    student,
                )
                da, ds = kernel.aggregate_gradient(
                    np.ones(ll.shape[0]), dll, specimen_idx, a_specimen.shape[0]
                )
                out = np.empty(a_specimen.shape[0] + 2)
                out[: a_specimen.shape[0]] = da
                out[a_specimen.shape[0]] = ds[0]
                out[a_specimen.shape[0] + 1] = ds[3]
                return np.asarray(ll.sum()), out

            return fast
        skip = np.array([False, False, not rel_error_free, False, not student])

        @numba_njit
        def full(a_specimen, sdev, rel_error, sasym, nu, y0, Y, M, V0, V, specimen_idx):
            ll, dll, _, _ = kernel.junction_terms(
                y0,
                Y,
                M,
                V0,
                V,
                a_specimen[specimen_idx],
                sdev.item(),
                rel_error.item(),
                sasym.item(),
                nu.item(),
                student,
                skip,
            )
            da, ds = kernel.aggregate_gradient(np.ones(ll.shape[0]), dll, specimen_idx, a_specimen.shape[0])
            out = np.empty(a_specimen.shape[0] + 4)
            out[: a_specimen.shape[0]] = da
            out[a_specimen.shape[0] :] = ds
            return np.asarray(ll.sum()), out

        return full


_register_numba()
