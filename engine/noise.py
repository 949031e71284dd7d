"""Noise budget: each signal's steady-state RMS, split by white-noise source.

Every source with a white-noise intensity ``W`` (``E[w(t) w(s)^T] = W delta(t - s)``)
contributes the stationary covariance ``X_s`` solving
``A X_s + X_s A^T + B_s W B_s^T = 0``; the variance of signal component ``z_i`` is
``(C X_s C^T)_ii``. Sources are independent, so variances add and each source's share is
its variance over the total. A signal with direct feedthrough from a white source has
infinite variance (white noise itself), reported as ``inf`` with a reason.

Where an estimator is linked to a plant (``{"plant": name}``), the estimation error
``e = x_plant - xhat`` is budgeted too, component by component.

One real Schur reduction of ``A`` serves every source and every signal; each source's
Lyapunov equation is solved in Schur coordinates on the part of the state it reaches
(:mod:`loopwright.engine.noise_shares` states the method).
"""
from __future__ import annotations

import math

from dataclasses import dataclass, field

import numpy as np

from loopwright.engine.blas_threads import one_blas_thread
from loopwright.engine.noise_shares import variances_by_source
from loopwright.engine.norms import is_stable_matrix
from loopwright.engine.responses import ReducedModel, reduce_model

__all__ = ["NoiseLine", "NoiseBudget", "noise_budget", "white_sources"]


@dataclass
class NoiseLine:
    """One budget line: a signal component (or estimation-error component).

    Attributes
    ----------
    name : str
        Component name (``y``, ``xhat[2]``, ``error:est[1]``).
    signal : str
        The signal (or ``error:<estimator>``) it belongs to.
    rms : float
        Steady-state RMS (``inf`` if unbounded).
    variance_by_source : dict
        Source name -> variance contributed.
    share_by_source : dict
        Source name -> fraction of the total variance (0..1; ``nan`` if the total is 0 or inf).
    reason : str
        Why ``rms`` is infinite, else empty.
    """

    name: str
    signal: str
    rms: float
    variance_by_source: dict[str, float]
    share_by_source: dict[str, float]
    reason: str = ""


@dataclass
class NoiseBudget:
    """The budget of a whole model: the white sources with their intensities and one line
    per signal component, then per estimation-error component."""

    sources: dict[str, np.ndarray]
    lines: list[NoiseLine] = field(default_factory=list)
    stable: bool = True
    message: str = ""

    def line(self, name: str) -> NoiseLine:
        for ln in self.lines:
            if ln.name == name:
                return ln
        raise KeyError(name)

    def as_dict(self) -> dict:
        return {
            "sources": {k: v for k, v in self.sources.items()},
            "stable": self.stable,
            "message": self.message,
            "signals": {
                ln.name: {
                    "signal": ln.signal,
                    "rms": ln.rms,
                    "variance_by_source": ln.variance_by_source,
                    "share_by_source": ln.share_by_source,
                    "reason": ln.reason,
                }
                for ln in self.lines
            },
        }


def white_sources(model) -> dict[str, np.ndarray]:
    """Source name -> intensity ``W`` (w x w) for every source that states one."""
    from loopwright.engine.blocks import source_intensity

    out = {}
    by_name = {b.name: b for b in model.diagram.blocks.values()}
    for name in model.sources:
        W = source_intensity(by_name[name])
        if W is not None:
            out[name] = np.asarray(W, dtype=float)
    return out


def _error_maps(model) -> list[tuple[str, np.ndarray, list[str]]]:
    """(estimator, E, component names) with ``e = E x`` for each linked estimator."""
    out = []
    n = model.A.shape[0]
    for b in model.diagram.blocks.values():
        plant = b.params.get("plant") if b.kind == "estimator" else None
        if not plant or plant not in model.states or b.name not in model.states:
            continue
        xs, es = model.states[plant], model.states[b.name]
        k = xs.stop - xs.start
        if es.stop - es.start != k:
            continue
        E = np.zeros((k, n))
        E[np.arange(k), np.arange(xs.start, xs.stop)] = 1.0
        E[np.arange(k), np.arange(es.start, es.stop)] -= 1.0
        names = [f"error:{b.name}"] if k == 1 else [f"error:{b.name}[{i + 1}]" for i in range(k)]
        out.append((b.name, E, names))
    return out


def noise_budget(model, *, reduced: ReducedModel | None = None) -> NoiseBudget:
    """Steady-state RMS of every signal component, split by white-noise source.

    Parameters
    ----------
    model : AssembledModel
    reduced : ReducedModel, optional
        A reduction of ``model.A`` to reuse.

    Returns
    -------
    NoiseBudget
        ``stable=False`` (every RMS ``inf``) when the closed loop is not stable.
    """
    srcs = white_sources(model)
    budget = NoiseBudget(sources=srcs)
    n = model.A.shape[0]
    errs = _error_maps(model)
    rows: list[tuple[str, str, np.ndarray, np.ndarray | None]] = []  # (name, signal, c row, d block)
    # the sources' columns of D only (they come first): its injection block is not needed
    n_src = max((model.inputs[name].stop for name in srcs), default=0)
    D_src = model.D[:, :n_src]
    for sig, sl in model.signals.items():
        for i in range(sl.start, sl.stop):
            rows.append((model.output_names[i], sig, model.C[i], D_src[i]))
    for est, E, names in errs:
        for i, nm in enumerate(names):
            rows.append((nm, f"error:{est}", E[i], None))
    red = None
    if n and srcs:
        # one reduction serves the stability test (its eigenvalues) and every source
        with one_blas_thread():
            red = reduce_model(model.A) if reduced is None else reduced
    stable = is_stable_matrix(model.A, eigenvalues=np.diag(red.T) if red is not None else None) if n else True
    budget.stable = stable
    if not srcs:
        budget.message = "no source states a white-noise intensity"
    if not stable:
        budget.message = "the closed loop is not stable: no stationary variance exists"
    var: dict[str, np.ndarray] = {}
    direct: dict[str, np.ndarray] = {}
    if stable and srcs and n:
        S = red.scale
        Cs = np.array([r[2] for r in rows]) * S[None, :]  # rows in the reduction's (possibly balanced) coordinates
        var = variances_by_source(red.T_real, red.Z_real, Cs, {name: (model.B[:, model.inputs[name]] / S[:, None], W) for name, W in srcs.items()})
    D_rows = np.array([np.zeros(n_src) if r[3] is None else r[3] for r in rows]).reshape(len(rows), n_src)
    for name, W in srcs.items():
        Dw = D_rows[:, model.inputs[name]]
        direct[name] = np.einsum("ij,jk,ik->i", Dw, W, Dw)
    # one (rows x sources) table, then one dictionary per line (the loops over 1e5 and more
    # entries stay in numpy)
    names = list(srcs)
    n_rows = len(rows)
    dmat = np.array([direct[name] for name in names]).T.reshape(n_rows, len(names))
    if not stable:
        vmat = np.full((n_rows, len(names)), np.inf)
    elif n == 0:
        vmat = np.zeros((n_rows, len(names)))
    else:
        vmat = np.array([var[name] for name in names], dtype=float).T.reshape(n_rows, len(names))
    white = dmat > 0
    vmat = np.where(white, np.inf, vmat)
    # what each line needs, for every line at once (the loop below only builds the lines)
    n_src_names = len(names)
    any_white = white.any(axis=1).tolist()
    last_white = (n_src_names - 1 - np.argmax(white[:, ::-1], axis=1)).tolist() if n_src_names else [0] * n_rows
    values_l = vmat.tolist()
    with np.errstate(invalid="ignore", divide="ignore"):
        infs = np.isinf(vmat)
        inf_share = np.where(infs, 1.0 / infs.sum(axis=1)[:, None], 0.0).tolist()
    totals = [float(sum(values)) for values in values_l]  # in source order, as each line adds them
    with np.errstate(invalid="ignore"):
        rms_l = np.sqrt(np.array(totals, dtype=float)).tolist()
    for k, (cname, sig, _, _) in enumerate(rows):
        values = values_l[k]
        vb = dict(zip(names, values))
        reason = ""
        if any_white[k]:
            last = names[last_white[k]]
            reason = f"direct feedthrough from white source {last!r}: the signal is itself white"
        total = totals[k]
        if not stable and srcs:
            reason = reason or "the closed loop is not stable"
        if math.isfinite(total) and total > 0:
            share = dict(zip(names, (vmat[k] / total).tolist()))
        elif math.isinf(total):
            share = dict(zip(names, inf_share[k])) if stable else dict.fromkeys(names, np.nan)
        else:
            share = dict.fromkeys(names, np.nan)
        budget.lines.append(NoiseLine(cname, sig, rms_l[k], vb, share, reason))
    return budget
