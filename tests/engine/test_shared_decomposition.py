"""One O(n^3) decomposition of the closed loop per revision, for the pole map and the
frequency view together (engine/views_data.py SharedModel). Counted, never timed."""
from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import scipy.linalg as sla
from numpy.testing import assert_allclose

from loopwright.engine.check import summarize
from loopwright.engine.eigen import eigen_sensitivity
from loopwright.engine.project import load
from loopwright.engine.views_data import SharedModel, frequency_views

SAMPLES = Path(__file__).resolve().parents[2] / "samples"

_DECOMPOSITIONS = [(sla, "schur"), (sla, "eig"), (sla, "eigvals"), (sla, "hessenberg"), (np.linalg, "eig"), (np.linalg, "eigvals")]


@pytest.fixture
def full_size_decompositions(monkeypatch):
    """Every eigenvalue or Schur decomposition of a full matrix as large as ``size[0]``, by
    name (the eigenvectors of an upper triangular factor, already decomposed, do not count)."""
    seen, size = [], [0]
    for mod, name in _DECOMPOSITIONS:
        real = getattr(mod, name)

        def counting(a, *args, _real=real, _name=name, **kwargs):
            if np.shape(a)[0] == size[0] and np.any(np.tril(a, -1)):
                seen.append(_name)
            return _real(a, *args, **kwargs)

        monkeypatch.setattr(mod, name, counting)
    return seen, size


@pytest.mark.parametrize("sample", ["conveyor_flexible_drive", "levitated_rotor_axis"])
def test_the_pole_map_and_the_frequency_view_share_one_decomposition(sample, full_size_decompositions):
    seen, size = full_size_decompositions
    d = load(str(SAMPLES / f"{sample}.lwd"))
    shared = SharedModel(d)
    size[0] = shared.model.n_states
    report = shared.report  # what the pole map shows
    pair = (next(iter(shared.model.sources)), shared.model.signals and next(iter(shared.model.signals)))
    views = frequency_views(d, [pair], drawing=True, shared=shared)
    assert seen == ["schur"], seen  # one Schur form of the closed loop (before: a Schur form and an eig)
    assert not isinstance(views[0], str)
    # the answers are those of each computed on its own (reference for the condition numbers:
    # scipy's eig with left vectors on the balanced matrix, as the check computed them before)
    alone = summarize(d)
    assert_allclose(np.sort_complex(report.poles), np.sort_complex(alone.poles), rtol=1e-10, atol=1e-12)
    Ab, _ = sla.matrix_balance(shared.model.A, permute=True, separate=False)
    w, vl, vr = sla.eig(Ab, left=True, right=True)
    kappa = 1.0 / np.abs(np.sum((vl / np.linalg.norm(vl, axis=0)).conj() * (vr / np.linalg.norm(vr, axis=0)), axis=0))
    assert_allclose(report.worst_condition, kappa.max(), rtol=1e-8)
    assert_allclose(eigen_sensitivity(shared.model.A).worst_condition, kappa.max(), rtol=1e-8)


@pytest.mark.parametrize("sample", ["conveyor_flexible_drive", "levitated_rotor_axis"])
def test_the_loop_break_view_takes_the_closed_loop_stability_from_the_shared_poles(sample, full_size_decompositions):
    # the loop closed at the break is the diagram itself: its nominal stability comes from the
    # shared decomposition, not from another eigenvalue decomposition of the closed loop;
    # the margins are those of the view computed on its own (and of python-control's
    # stability_margins where comparable: see tests/engine/test_margins.py)
    from loopwright.engine.views_data import loop_break_view

    seen, size = full_size_decompositions
    d = load(str(SAMPLES / f"{sample}.lwd"))
    alone = loop_break_view(d, "P.u", limits=False)
    shared = SharedModel(d)
    size[0] = shared.model.n_states
    shared.poles  # the pole map's decomposition, already made when the loop-break view runs
    seen.clear()
    view = loop_break_view(d, "P.u", limits=False, shared=shared)
    assert "eigvals" not in seen and "eig" not in seen, seen
    assert view.margins.closed_loop_stable == alone.margins.closed_loop_stable is True
    for name in ("phase_margin_deg", "gain_upper", "gain_lower", "peak_sensitivity", "delay_margin_s"):
        assert_allclose(getattr(view.margins, name), getattr(alone.margins, name), rtol=1e-9)
    assert_allclose(view.margins.disk.alpha, alone.margins.disk.alpha, rtol=1e-9)


@pytest.mark.parametrize("sample", ["conveyor_flexible_drive", "levitated_rotor_axis", "two_zone_oven"])
def test_the_opened_loop_reuses_the_closed_loops_realisations_and_is_the_same_model(sample, monkeypatch):
    # breaking the loop changes only how the signals are routed: with the closed loop's block
    # realisations the opened loop is the same model to the bit, and no block is realised again
    import loopwright.engine.interconnect as ic
    from loopwright.engine.interconnect import assemble

    d = load(str(SAMPLES / f"{sample}.lwd"))
    at = "P.u" if "P" in {b.name for b in d.blocks.values()} else d.settings.get("loop_break")
    fresh = assemble(d, break_at=at)
    closed = assemble(d, take=True)
    realised = []
    monkeypatch.setattr(ic, "realize", lambda b, snap: realised.append(b.name) or pytest.fail("realised again"))
    reused = assemble(d, break_at=at, like=closed)
    assert realised == []
    for name in ("A", "B", "C"):
        assert np.array_equal(getattr(reused, name), getattr(fresh, name)), name
    assert np.array_equal(reused.D[:, :], fresh.D[:, :])
    assert reused.input_names == fresh.input_names and reused.output_names == fresh.output_names
    with pytest.raises(ValueError, match="another diagram"):
        assemble(d.copy(), break_at=at, like=closed)
