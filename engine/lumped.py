"""The lumped controller: everything between the measured signals and the actuator
signals of a diagram, as one state-space model -- and the sampled version of the loop.

Method
------
On a copy of the diagram, every wire that carries a measured signal is re-attached to a
new, silent source block (its consumers now read that source; the block that drove it is
left unwired). The copy is assembled and the map from those new sources to the actuator
signals is read off. In that map the plant's states are still present but cannot reach
the actuator any more (their path back ran through the measured wires), so states that
are structurally unreachable from the new sources, or structurally invisible at the
actuator signals, are dropped (a sparsity-pattern graph search on A, B, C: exact, no
rounding). Other sources -- references, disturbances -- are simply not inputs of the
lumped controller.

Sign convention: the lumped controller is the map *as drawn*, ``u = G_c(s) y``. For the
observer-based loop ``u = -K xhat`` with ``xhat' = A xhat + B u + L (y - C xhat - D u)`` this
is ``G_c(s) = -K (sI - A + BK + LC - LDK)^-1 L``: the usual controller transfer
``K (sI - A + BK + LC - LDK)^-1 L`` appears with a minus sign, because the loop's negative
feedback lives inside the drawing.

The plant path (actuator -> measured) is found the same way with the actuator wires
re-attached instead. The loop transfer at the actuator is ``L = -G_c P`` (the convention of
the loop break: ``L = -(returned)/(injected)``); the sampled loop is
``L_d(z) = -G_cd(z) P_d(z)`` with ``P_d`` the zero-order-hold discretisation of the plant
path and ``G_cd`` the controller discretised as chosen, evaluated on the unit circle up to
the Nyquist frequency ``pi / T``.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from loopwright.engine.diagram import Diagram, PortRef
from loopwright.engine.discretize import DiscreteModel, discrete_frequency_response, discretize
from loopwright.engine.blocks import port_widths
from loopwright.engine.errors import AnalysisError, DesignError, EngineError
from loopwright.engine.interconnect import AssembledModel, assemble, signal_names
from loopwright.engine.margins import LoopMargins, _close_channels, loop_margins, margins_from_response
from loopwright.engine.responses import auto_frequency_grid
from loopwright.engine.structure import transmission_zeros

__all__ = [
    "LumpedModel",
    "lumped_controller",
    "plant_path",
    "default_loop_signals",
    "controller_transfer_function",
    "SampledLoopComparison",
    "sampled_loop_margins",
]


@dataclass(frozen=True)
class LumpedModel:
    """A map between chosen signals of a diagram: ``x' = A x + B u``, ``y = C x + D u``.

    Attributes
    ----------
    A : (n, n), B : (n, m), C : (p, n), D : (p, m) ndarray
    state_names : tuple of str
        The diagram states kept (``est.xhat1`` ...).
    input_names, output_names : tuple of str
        Signal component names (``y_meas``, ``u[2]``).
    inputs, outputs : tuple of str
        The signals as chosen.
    """

    A: np.ndarray
    B: np.ndarray
    C: np.ndarray
    D: np.ndarray
    state_names: tuple[str, ...]
    input_names: tuple[str, ...]
    output_names: tuple[str, ...]
    inputs: tuple[str, ...]
    outputs: tuple[str, ...]


def _comp(name: str, width: int) -> list[str]:
    return [name] if width == 1 else [f"{name}[{k + 1}]" for k in range(width)]


def _structural_keep(A: np.ndarray, B: np.ndarray, C: np.ndarray) -> np.ndarray:
    """States reachable from B's columns and seen by C's rows through A's sparsity pattern."""
    nz = A != 0
    reach = np.any(B != 0, axis=1)
    while True:
        nxt = reach | np.any(nz[:, reach], axis=1)
        if np.array_equal(nxt, reach):
            break
        reach = nxt
    seen = np.any(C != 0, axis=0)
    while True:
        nxt = seen | np.any(nz[seen, :], axis=0)
        if np.array_equal(nxt, seen):
            break
        seen = nxt
    return reach & seen


def _cut_map(diagram: Diagram, cut: list[str], read: list[str], *, what: str) -> LumpedModel:
    plain = _plain_signal_ports(diagram, cut, read)
    if plain is not None:
        # the usual case, with one assembly (of the cut copy); anything wrong there goes the
        # checked way below, which names the problem as it always has
        try:
            return _cut_and_read(diagram, cut, read, *plain, what=what)
        except EngineError:
            pass
    base = assemble(diagram)
    cut = [base.resolve_signal(s) for s in cut]
    read = [base.resolve_signal(s) for s in read]
    if not cut or not read:
        raise DesignError(f"{what}: name at least one input signal and one output signal")
    clash = sorted(set(cut) & set(read))
    if clash:
        raise DesignError(f"{what}: signal(s) {', '.join(clash)} cannot be both an input and an output")
    for s in cut + read:
        if s not in base.signals:
            whole = s[: s.rindex("[")]
            raise DesignError(f"{what}: {s!r} is one component of signal {whole!r}; name whole signals ({whole!r})")
    ports = {sig: base.signal_ports[sig] for sig in cut}
    widths = {sig: base.signals[sig].stop - base.signals[sig].start for sig in cut}
    return _cut_and_read(diagram, cut, read, ports, widths, what=what)


def _plain_signal_ports(diagram: Diagram, cut: list[str], read: list[str]) -> tuple[dict[str, PortRef], dict[str, int]] | None:
    """The output port and width of every ``cut`` signal, read off the diagram without
    assembling it, or None unless every name is a whole signal of the diagram (no
    component ``u[2]``), named once, with inputs and outputs apart and neither empty.

    The widths are those the assembly gives (:func:`~loopwright.engine.blocks.port_widths`
    realises the block as the assembly does); a block whose parameters do not realise
    gives None.
    """
    if not cut or not read or set(cut) & set(read):
        return None
    ports: dict[str, PortRef] = {}
    for ref, name in signal_names(diagram).items():
        if name in ports:
            return None  # two signals of one name: the assembly refuses the diagram
        ports[name] = ref
    if not all(s in ports for s in cut) or not all(s in ports for s in read):
        return None
    widths: dict[str, int] = {}
    for sig in cut:
        ref = ports[sig]
        try:
            widths[sig] = port_widths(diagram.blocks[ref.block], diagram)[1][ref.port]
        except (EngineError, LookupError):
            return None
    return {sig: ports[sig] for sig in cut}, widths


def _cut_and_read(diagram: Diagram, cut: list[str], read: list[str], ports: dict[str, PortRef], widths_of: dict[str, int],
                  *, what: str) -> LumpedModel:
    """The map from the ``cut`` signals (each leaving ``ports[sig]``, ``widths_of[sig]`` wide)
    to the ``read`` signals, on a copy of ``diagram`` (see the module docstring)."""
    work = diagram.copy()
    new_sources: list[str] = []
    widths: list[int] = []
    for sig in cut:
        port = ports[sig]
        wire = work.wire_from(port)
        if wire is None or not wire.targets:
            raise DesignError(f"{what}: signal {sig!r} feeds no block, so nothing depends on it")
        w = widths_of[sig]
        if work.blocks[port.block].kind == "source":
            # a reference read by the controller (feedforward): the source already is an input
            new_sources.append(work.blocks[port.block].name)
            widths.append(w)
            continue
        name = work.unique_name("cut_" + "".join(ch if ch.isalnum() else "_" for ch in sig))
        bid = work.add_block("source", name, {"role": "reference", "width": w, "waveform": {"kind": "zero"}})
        wire.source = PortRef(bid, "out")
        new_sources.append(name)
        widths.append(w)
    model: AssembledModel = assemble(work, take=True)  # our own copy, changed no more
    B = np.hstack([model.B[:, model.inputs[s]] for s in new_sources])
    rows = [model.signals[model.resolve_signal(s)] for s in read]
    C = np.vstack([model.C[r] for r in rows])
    D = np.vstack([np.hstack([model.D[r, model.inputs[s]] for s in new_sources]) for r in rows])
    keep = _structural_keep(model.A, B, C)
    A = model.A[np.ix_(keep, keep)]
    names = tuple(n for n, k in zip(model.state_names, keep) if k)
    in_names = tuple(c for s, w in zip(cut, widths) for c in _comp(s, w))
    # a read signal is not cut, so it keeps its name and width in the copy
    out_names = tuple(c for s in read for c in _comp(s, model.signals[s].stop - model.signals[s].start))
    return LumpedModel(A, B[keep], C[:, keep], D, names, in_names, out_names, tuple(cut), tuple(read))


def lumped_controller(diagram: Diagram, *, measured: list[str], actuator: list[str]) -> LumpedModel:
    """The controller from the measured signals to the actuator signals, as one model.

    Parameters
    ----------
    diagram : Diagram
        Not modified.
    measured : list of str
        Signals the controller reads (e.g. the estimator's ``y`` input wire).
    actuator : list of str
        Signals the controller drives (e.g. the plant's input wire).

    Returns
    -------
    LumpedModel
        ``u = G_c(s) y`` as drawn (see the module docstring for the sign).

    Raises
    ------
    UnknownNameError
        A signal name that does not exist (with suggestions).
    DesignError
        A signal both measured and actuated, or one that feeds nothing.
    """
    return _cut_map(diagram, list(measured), list(actuator), what="lumped controller")


def plant_path(diagram: Diagram, *, actuator: list[str], measured: list[str]) -> LumpedModel:
    """The plant as seen by the controller: the map from the actuator signals to the
    measured signals with the controller cut away (same method as :func:`lumped_controller`)."""
    return _cut_map(diagram, list(actuator), list(measured), what="plant path")


def default_loop_signals(diagram: Diagram) -> tuple[list[str], list[str]]:
    """The signals a lumped controller is usually taken between, read off the estimator.

    Returns
    -------
    (measured, actuator) : (list of str, list of str)
        The signal into the estimator's ``y`` input, and the signal into the ``u`` input of
        the plant the estimator is linked to.

    Raises
    ------
    DesignError
        The diagram has no estimator or several, the estimator is not linked to a plant, or
        either input is not wired; the message says to name the signals.
    """
    ests = [b for b in diagram.blocks.values() if b.kind == "estimator"]
    if len(ests) != 1:
        raise DesignError(f"the diagram has {len(ests)} estimators; name the controller's measured and actuator signals")
    est = ests[0]
    y = diagram.wire_into(PortRef(est.id, "y"))
    plant_name = est.params.get("plant")
    u = None
    if isinstance(plant_name, str) and plant_name in {b.name for b in diagram.blocks.values()}:
        u = diagram.wire_into(PortRef(diagram.block_by_name(plant_name).id, "u"))
    if y is None or u is None:
        raise DesignError(f"cannot tell the measured and actuator signals from estimator {est.name!r}; name them")
    return [y.name], [u.name]


def controller_transfer_function(model: LumpedModel) -> dict:
    """Transfer function, poles and zeros of a single-input single-output lumped model.

    Returns
    -------
    dict
        ``num``, ``den`` (descending powers of s, ``den`` monic), ``poles``, ``zeros``
        (complex arrays, rad/s), ``gain`` (leading numerator coefficient).

    Raises
    ------
    DesignError
        The model is not SISO.
    """
    if model.B.shape[1] != 1 or model.C.shape[0] != 1:
        raise DesignError(
            f"a transfer function is shown for one input and one output; this controller has "
            f"{model.B.shape[1]} input(s) and {model.C.shape[0]} output(s)"
        )
    n = model.A.shape[0]
    if n == 0:
        return {"num": model.D[0].copy(), "den": np.ones(1), "poles": np.zeros(0, complex), "zeros": np.zeros(0, complex), "gain": float(model.D[0, 0])}
    import scipy.signal as ssig  # here, not at the top: importing it is most of a command's start-up

    num, den = ssig.ss2tf(model.A, model.B, model.C, model.D)
    num = np.atleast_2d(num)[0]
    # strip leading (numerically) zero numerator terms so the degree is honest
    scale = max(1.0, float(np.max(np.abs(num))))
    first = int(np.argmax(np.abs(num) > 1e-12 * scale)) if np.any(np.abs(num) > 1e-12 * scale) else num.size - 1
    num = num[first:]
    zeros = transmission_zeros(model.A, model.B, model.C, model.D)
    return {"num": num, "den": den, "poles": np.linalg.eigvals(model.A), "zeros": zeros, "gain": float(num[0])}


@dataclass(frozen=True)
class SampledLoopComparison:
    """Margins of the loop at the actuator: continuous controller vs sampled controller.

    ``delta`` holds sampled minus continuous for the phase margin (deg), the delay
    margin (s) and the gain-margin bounds (dB).
    """

    continuous: LoopMargins
    sampled: LoopMargins
    controller: DiscreteModel
    plant: DiscreteModel
    delta: dict


def _series_loop(K, P):
    """State space of ``L = -K P`` (P first); K and P carry ``A, B, C, D`` (continuous or discrete)."""
    nk, npl = K.A.shape[0], P.A.shape[0]
    A = np.block([[P.A, np.zeros((npl, nk))], [K.B @ P.C, K.A]])
    B = np.vstack([P.B, K.B @ P.D])
    C = -np.hstack([K.D @ P.C, K.C])
    D = -(K.D @ P.D)
    return A, B, C, D


def sampled_loop_margins(
    diagram: Diagram,
    *,
    measured: list[str],
    actuator: str,
    ts: float,
    method: str = "zoh",
    prewarp_rad_s: float | None = None,
    channel: int = 0,
    points: int = 3000,
) -> SampledLoopComparison:
    """How far the margins at the actuator fall when the controller runs sampled.

    The continuous loop ``L = -G_c P`` uses the lumped controller and the plant path; the
    sampled loop uses the controller discretised by ``method`` and the plant discretised
    by zero-order hold (the hold a DAC applies), evaluated at ``z = e^{j w T}`` on a grid up
    to ``pi / T`` and fed to :func:`margins_from_response`. For a vector actuator signal the
    loop is broken at component ``channel`` (0-based) with the other components closed, in
    both the continuous and the sampled loop (loop at a time).

    Raises
    ------
    AnalysisError
        ``channel`` is not a component of the actuator signal, or the loop is not square.
    """
    K = lumped_controller(diagram, measured=measured, actuator=[actuator])
    P = plant_path(diagram, actuator=[actuator], measured=measured)
    q = K.C.shape[0]
    if not 0 <= channel < q:
        raise AnalysisError(f"actuator {actuator!r} has {q} component(s); channel {channel + 1} does not exist")
    if P.C.shape[0] != K.B.shape[1]:
        raise AnalysisError(f"the loop at {actuator!r} is not square: the controller reads {K.B.shape[1]} signals, the plant gives {P.C.shape[0]}")
    cont = loop_margins(*_close_channels(*_series_loop(K, P), channel))
    Kd = discretize(K.A, K.B, K.C, K.D, ts, method=method, prewarp_rad_s=prewarp_rad_s)
    Pd = discretize(P.A, P.B, P.C, P.D, ts, method="zoh")
    Ad, Bd, Cd, Dd = _close_channels(*_series_loop(Kd, Pd), channel)
    w_nyq = np.pi / ts
    zpoles = np.linalg.eigvals(Ad) if Ad.size else np.zeros(0)
    # A repeated pole at s = 0 (a double integrator) maps to a defective pole at z = 1 that
    # eig only finds to about sqrt(machine epsilon); count it as an integrator, not unstable.
    near_one = np.abs(zpoles - 1.0) <= 1e-6
    at_one = int(np.sum(near_one))
    unstable = int(np.sum((np.abs(zpoles) > 1.0 + 1e-9) & ~near_one))
    poles = np.concatenate([np.linalg.eigvals(K.A), np.linalg.eigvals(P.A)]) if (K.A.size or P.A.size) else np.zeros(0)
    if poles.size:
        # integrators computed as tiny nonzero poles would stretch the grid down to 1e-9 rad/s
        poles = poles[np.abs(poles) > 1e-6 * max(1.0, float(np.max(np.abs(poles))))]
    grid = auto_frequency_grid(poles, w_max=w_nyq * (1 - 1e-9), points_per_decade=max(60, points // 8))
    # Both ends of the unit circle belong to the grid: z = 1 (w = 0) and z = -1 (w = pi/T),
    # where the loop of a real model is real. A crossing of the negative real axis there
    # (the DC gain of a loop around an unstable plant; the Nyquist-frequency crossing of a
    # sampled loop) sets a gain margin that samples just inside the ends cannot show.
    # (An end where the loop has a pole -- an integrator at z = 1 -- is left out.)
    ends = [w for w, z in ((0.0, 1.0), (w_nyq, -1.0)) if not np.any(np.abs(zpoles - z) <= 1e-6)]
    grid = np.unique(np.concatenate([grid, np.linspace(grid[0], w_nyq, points), ends]))
    Lz = discrete_frequency_response(DiscreteModel(Ad, Bd, Cd, Dd, ts, method), grid)[:, 0, 0]
    samp = margins_from_response(grid, Lz, open_loop_unstable_poles=unstable, poles_at_origin=at_one)

    def db(g: float) -> float:
        return float(20 * np.log10(g)) if g > 0 and np.isfinite(g) else (float("inf") if g == np.inf else float("-inf") if g == 0 else float("nan"))

    delta = {
        "phase_margin_deg": samp.phase_margin_deg - cont.phase_margin_deg,
        "delay_margin_s": samp.delay_margin_s - cont.delay_margin_s,
        "gain_upper_db": db(samp.gain_upper) - db(cont.gain_upper) if np.isfinite(db(cont.gain_upper)) else float("nan"),
        "gain_lower_db": db(samp.gain_lower) - db(cont.gain_lower) if np.isfinite(db(cont.gain_lower)) else float("nan"),
    }
    return SampledLoopComparison(cont, samp, Kd, Pd, delta)
