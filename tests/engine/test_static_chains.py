"""Long chains of static blocks: exact models, assembled by the linear route.

References: closed forms stated beside each check; the dense inverse of ``I - D M``
(``numpy.linalg.inv``) on the same matrices; and the full JSON Schema validator
(``jsonschema`` 4.26, Draft 2020-12) for the loader's quick check.
"""
from __future__ import annotations

import copy
import json
import pickle

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from loopwright.engine import project
from loopwright.engine.check import summarize
from loopwright.engine.diagram import Diagram
from loopwright.engine.errors import DiagramError
from loopwright.engine.interconnect import assemble
from loopwright.engine.noise import noise_budget
from loopwright.engine.static_chains import AcyclicFeedthrough, FeedthroughMatrix
from strategies import loop_diagrams

SETTINGS = settings(max_examples=25, deadline=None, suppress_health_check=[HealthCheck.too_slow])


def _chain_loop(gains) -> Diagram:
    """A first-order plant ``2/(s + 1)`` under ``u = g (r - y_m)`` through gains in series,
    with a load ``d`` added by a junction halfway along the chain (demo data).

    ``s<k>`` is the signal into gain ``k``; the junction ``j`` sits before gain ``len(gains) // 2``.
    """
    d = Diagram()
    for name, role in (("r", "reference"), ("n", "noise"), ("ld", "disturbance")):
        d.add_block("source", name, {"role": role, "width": 1, "waveform": {"kind": "white", "intensity": 1e-4}})
    for name in ("e", "j", "ym"):
        d.add_block("sum", name, {"signs": ["+", "-"] if name == "e" else ["+", "+"], "width": 1})
    d.add_block("plant", "P", {"num": [2.0], "den": [1.0, 1.0]})
    prev = "e.out"
    for k, g in enumerate(gains):
        if k == len(gains) // 2:
            d.connect(prev, "j.in1", name="before_j")
            d.connect("ld.out", "j.in2")
            prev = "j.out"
        d.add_block("gain", f"g{k}", {"K": [[float(g)]]})
        d.connect(prev, f"g{k}.in", name=f"s{k}")
        prev = f"g{k}.out"
    wires = [("r.out", "e.in1", None), (prev, "P.u", "u"), ("P.y", "ym.in1", "y"), ("n.out", "ym.in2", None), ("ym.out", "e.in2", "ym")]
    for src, dst, name in wires:
        d.connect(src, dst, name=name)
    return d


def test_a_long_chain_of_unit_gains_assembles_exactly_without_forming_the_injection_block():
    # closed form: x' = -(1 + 2 g) x with g = 1 (the product of the unit gains); u/r has the
    # feedthrough g; an injection at s_k (into gain k) reaches u through gains k.. (product 1),
    # and the noise n reaches u through -g
    gains = 3000
    m = assemble(_chain_loop([1.0] * gains))
    assert isinstance(m.D, FeedthroughMatrix) and isinstance(m.D.inverse, AcyclicFeedthrough)
    assert_allclose(m.A, [[-3.0]], rtol=0, atol=0)
    assert_allclose(m.pair("r", "u")[3], [[1.0]], rtol=0, atol=0)
    assert_allclose(m.pair("n", "u")[3], [[-1.0]], rtol=0, atol=0)
    assert_allclose(m.pair("ld", "u")[3], [[1.0]], rtol=0, atol=0)
    for k in (0, 1, gains // 2, gains - 1):
        assert_allclose(m.pair(f"s{k}", "u")[3], [[1.0]], rtol=0, atol=0)
        assert_allclose(m.pair("u", f"s{k}")[3], [[0.0]], rtol=0, atol=0)  # u feeds no static block
    # the linear route: graph order makes I - D M triangular, its factor has no fill (one
    # entry per signal and per feedthrough link: one per gain, two per junction), and no
    # command below needs the ns x ns injection block
    ns = len(m.signals)
    assert ns == gains + 7  # 3 sources, 3 junctions, the plant
    assert m.D.inverse.factor_nnz == ns + gains + 6
    summarize(m.diagram)
    noise_budget(m)
    assert not m.D.is_formed


@SETTINGS
@given(st.lists(st.floats(-3.0, 3.0).filter(lambda g: abs(g) > 0.1), min_size=1, max_size=40))
def test_chain_feedthrough_is_the_product_of_the_gains_after_the_injection(gains):
    # closed form: s_k is the signal into gain k, so from its injection to u the feedthrough
    # is prod(gains[k:]); the
    # loop's pole is -(1 + 2 g) with g = prod(gains)
    m = assemble(_chain_loop(gains))
    g = float(np.prod(gains))
    assert_allclose(m.A, [[-1.0 - 2.0 * g]], rtol=1e-12)
    for k in range(len(gains)):
        assert_allclose(m.pair(f"s{k}", "u")[3], [[np.prod(gains[k:])]], rtol=1e-12)
    assert_allclose(m.pair("ld", "u")[3], [[np.prod(gains[len(gains) // 2 :])]], rtol=1e-12)


def _keys(ns_rows: int, ns_cols: int):
    """Index expressions as callers write them."""
    return [
        (slice(None), slice(2, 5)),
        (slice(1, None, 2), slice(None)),
        3,
        -1,
        (4, 2),
        (-2, slice(None, None, -1)),
        ([0, 3, 3, 1], slice(None)),
        (slice(None), [5, 0, 5]),
        np.ix_([1, 2], [0, 4, 3]),
        (np.array([0, 2]), np.array([1, 3])),
        (np.arange(ns_rows) % 2 == 0, slice(0, 3)),
        (slice(None), np.arange(ns_cols) % 3 == 1),
        np.ix_(range(2, 4), range(1, 6)),
        (range(2, 4), range(1, 6)),  # two index arrays that do not broadcast: IndexError
        ([], slice(None)),
    ]


@SETTINGS
@given(loop_diagrams())
def test_reading_pieces_of_d_equals_reading_the_whole(d):
    # reference: the dense D of the same diagram (np.asarray forms it)
    whole = np.asarray(assemble(d).D)
    for key in _keys(*whole.shape):
        lazy = assemble(d).D  # a fresh model, so the piece is computed on its own
        try:
            want = whole[key]
        except IndexError:
            with pytest.raises(IndexError):
                lazy[key]
            continue
        if isinstance(key, tuple) and any(np.size(k) == 0 for k in key if not isinstance(k, slice)):
            assert lazy[key].shape == want.shape
            continue
        assert_allclose(lazy[key], want, rtol=1e-12, atol=1e-14, err_msg=repr(key))


@SETTINGS
@given(loop_diagrams())
def test_the_injection_block_equals_the_dense_inverse(d):
    # reference: numpy.linalg.inv(I - D M) on the same matrices; B's injection columns are
    # B_u M times that inverse
    m = assemble(d)
    if not isinstance(m.D.inverse, AcyclicFeedthrough):
        return
    inv = m.D.inverse
    ns = inv.ns
    ref = np.linalg.inv(np.eye(ns) - inv.DM.toarray())
    assert_allclose(inv.columns(np.arange(ns)), ref, rtol=1e-12, atol=1e-13)
    assert_allclose(inv.rows(np.arange(ns)), ref, rtol=1e-12, atol=1e-13)
    assert np.all(inv.row_sum_bound() >= np.abs(ref).max(axis=1) - 1e-12)


def test_gains_that_multiply_beyond_the_limit_along_a_chain_are_refused():
    # 12 gains of 1e10 each are fine on their own; their product 1e120 exceeds the 1e100 limit
    with pytest.raises(DiagramError, match="badly scaled"):
        assemble(_chain_loop([1e10] * 12))


def test_an_injection_block_bound_within_the_limit_is_not_formed():
    # closed form: the row sums of (I - |D M|)^-1 on a chain of gains 10 are 1 + 10 + ... + 10^k,
    # below the limit for 40 gains (about 1.1e40): nothing is formed to check the range
    m = assemble(_chain_loop([10.0] * 40))
    assert not m.D.is_formed


# ---- the loader's quick schema check --------------------------------------------------

_LEAVES = st.none() | st.booleans() | st.integers(-3, 3) | st.floats(-1e3, 1e3) | st.sampled_from(["", "x", "+", "-", "u", "a.b", "gain", "P\n"])
_JSON_VALUES = st.one_of(
    _LEAVES,
    st.lists(_LEAVES, max_size=3),
    st.lists(st.lists(_LEAVES, max_size=2), max_size=2),
    st.dictionaries(st.sampled_from(["K", "x", "kind", "name", "width", "signs"]), _LEAVES, max_size=3),
)


def _mutate(doc, data) -> None:
    """Replace one value somewhere in ``doc`` (a random walk down from the top)."""
    node = doc
    while True:
        keys = list(node) if isinstance(node, dict) else list(range(len(node)))
        if not keys:
            return
        key = data.draw(st.sampled_from(keys))
        child = node[key]
        if isinstance(child, (dict, list)) and child and data.draw(st.booleans()):
            node = child
            continue
        node[key] = data.draw(_JSON_VALUES)
        return


_SAMPLE = project.to_dict(_chain_loop([2.0, 0.5]))


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(st.data())
def test_the_quick_schema_check_never_accepts_what_the_full_validator_refuses(data):
    # reference: jsonschema's Draft 2020-12 validator on the same schema
    doc = copy.deepcopy(_SAMPLE)
    for _ in range(data.draw(st.integers(1, 3))):
        _mutate(doc, data)
    doc = json.loads(json.dumps(doc))
    if project._quick_validator()(doc):
        assert not list(project._validator()[0].iter_errors(doc))


def test_the_quick_schema_check_accepts_a_valid_file():
    assert project._quick_validator()(json.loads(project.dumps(_chain_loop([1.0] * 3))))


def test_a_model_with_an_unformed_injection_block_pickles_and_copies():
    # reference: the pieces of the original model's D (closed form: a chain of unit gains)
    m = assemble(_chain_loop([1.0] * 30))
    for other in (pickle.loads(pickle.dumps(m)), copy.deepcopy(m)):
        assert not other.D.is_formed
        assert_allclose(other.D[:, m.inputs["inject:s3"]], m.D[:, m.inputs["inject:s3"]], rtol=0, atol=0)
