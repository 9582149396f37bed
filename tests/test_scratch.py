"""Buffers kept between engine calls, and the adjoint forward pass that keeps O psi.

The pool (`qgradlib.engine.scratch`) must never hand one array to two callers, never hold
more than its bounds, and never let a later call write into a state a caller was given.
The adjoint method's forward value ``<psi|O psi>`` and its backward pass from the kept
``O psi`` must agree with the dense reference (scipy's ``expm`` and ``expm_frechet``,
tests/reference/curv_dense.py) whatever the observable: Z, X and odd-Y words, a dense part,
single precision, repeated rows.
"""
import threading

import numpy as np
import pytest
from autograd import grad, jacobian

import qgradlib as qg
from qgradlib.engine import scratch
from qgradlib.engine.statevector import run

from reference import curv_dense as dense
from test_memory import _circuit     # H and RY layers, a CNOT chain, RX and RZ layers


def test_a_returned_array_comes_back_and_a_taken_one_is_out_of_the_pool():
    # common practice: a free list hands each buffer to one borrower at a time
    scratch.clear()
    a = scratch.take((3, 8), np.complex128)
    assert a.shape == (3, 8) and a.dtype == np.complex128 and a.flags.c_contiguous
    scratch.give(a)
    b = scratch.take((3, 8), np.complex128)
    assert b is a
    c = scratch.take((3, 8), np.complex128)
    assert c is not a
    assert scratch.take((3, 8), np.complex64).dtype == np.complex64


def test_the_pool_keeps_no_views_no_large_arrays_and_stays_within_its_bound():
    # common practice: a cache of buffers is bounded, and a view would alias its base
    scratch.clear()
    base = np.empty((4, 16), dtype=complex)
    scratch.give(base[:2])                       # a view: not kept
    assert scratch.clear() == 0
    scratch.give(np.empty(scratch.ARRAY_BYTES // 16 + 1, dtype=complex))   # too large
    assert scratch.clear() == 0
    scratch.give(np.empty((2, 16), dtype=complex))                         # kept
    assert scratch.clear() == 2 * 16 * 16
    row = scratch.ARRAY_BYTES // 16
    for _ in range(2 * scratch.POOL_BYTES // scratch.ARRAY_BYTES + 2):
        scratch.give(np.empty(row, dtype=complex))
    assert scratch.clear() <= scratch.POOL_BYTES


def test_threads_never_share_a_borrowed_array():
    # common practice: a shared free list under a lock gives each thread its own buffer
    scratch.clear()
    for _ in range(8):
        scratch.give(np.empty((1, 64), dtype=complex))
    seen, lock = [], threading.Lock()

    def borrow():
        for _ in range(200):
            a = scratch.take((1, 64))
            with lock:
                assert all(a is not b for b in seen)
                seen.append(a)
            a[...] = 0
            with lock:
                seen.remove(a)
            scratch.give(a)

    threads = [threading.Thread(target=borrow) for _ in range(4)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()


@pytest.mark.parametrize("fuse", [True, False])
def test_a_state_handed_out_is_never_written_by_a_later_run(fuse):
    # reference: the state from scipy's expm of each gate (tests/reference/curv_dense.py);
    # runs of the same shape in between would reuse a pooled buffer if it aliased the result
    c = _circuit(5)
    rng = np.random.default_rng(3)
    theta = rng.uniform(-3, 3, size=c.n_params)
    psi = run(c, c.angles(theta)[None, :], fuse=fuse)
    for _ in range(3):
        run(c, c.angles(rng.uniform(-3, 3, size=c.n_params))[None, :], fuse=fuse)
    expected, _ = dense.state_and_derivatives(c, theta)
    assert np.max(np.abs(psi[0] - expected)) <= 1e-12


OBSERVABLES = {
    "Z pairs and X": lambda n: qg.Observable({"I" * k + "ZZ" + "I" * (n - k - 2): 1.0 for k in range(n - 1)}
                                             | {"I" * k + "X" + "I" * (n - k - 1): 0.5 for k in range(n)}),
    "odd Y words": lambda n: qg.Observable({"Y" + "I" * (n - 1): 0.7, "XY" + "Z" * (n - 2): -0.3}),
    "identity term": lambda n: qg.Observable({"I" * n: 0.5, "Z" + "I" * (n - 1): 1.0, "X" * n: 0.3}),
    "dense part": lambda n: qg.Observable({"Z" * n: 0.4})
    + qg.Observable.from_matrix(np.diag(np.linspace(-1, 1, 2 ** n))),
}


# a dense part on 13 qubits is a 1 GiB matrix: the general backward pass copies O psi alike
@pytest.mark.parametrize("n, name", [(n, name) for n in (3, 13) for name in OBSERVABLES
                                     if (n, name) != (13, "dense part")])
def test_adjoint_value_and_gradient_from_the_kept_o_psi_match_the_dense_reference(n, name):
    # reference: scipy's expm / expm_frechet (tests/reference/curv_dense.py); 13 qubits take
    # the general backward pass, 3 the lean one; both start from the forward pass's O psi
    c = qg.Circuit(n)
    for q in range(n):
        c.ry(q)
    for q in range(n - 1):
        c.cnot(q, q + 1)
    c.rx(0).rz(n - 1)
    H = OBSERVABLES[name](n)
    theta = np.random.default_rng(n).uniform(-3, 3, size=c.n_params)
    f = lambda t: qg.expect(c, H, t, gradient="adjoint")    # noqa: E731
    if n <= 8:
        assert abs(f(theta) - dense.expectation(c, H, theta)) <= 1e-12
        assert np.max(np.abs(grad(f)(theta) - dense.gradient(c, H, theta))) <= 1e-11
    else:
        # 2**13 is too large for dense matrices: the shift rule (another algorithm) instead
        ref = grad(lambda t: qg.expect(c, H, t))(theta)
        assert abs(f(theta) - qg.expect(c, H, theta)) <= 1e-12
        assert np.max(np.abs(grad(f)(theta) - ref)) <= 1e-11


def test_repeated_rows_and_single_precision_keep_their_o_psi_right():
    # reference: scipy's expm / expm_frechet (tests/reference/curv_dense.py); a batch with a
    # repeated row keeps O psi for the unique rows and spreads it back to every row
    n = 4
    c = _circuit(n)
    H = OBSERVABLES["Z pairs and X"](n)
    rng = np.random.default_rng(5)
    a, b = rng.uniform(-3, 3, size=(2, c.n_params))
    batch = np.stack([a, b, a])
    J = jacobian(lambda t: qg.expect(c, H, t, gradient="adjoint"))(batch)
    for i, t in enumerate(batch):
        assert np.max(np.abs(J[i, i] - dense.gradient(c, H, t))) <= 1e-11
    g32 = grad(lambda t: qg.expect(c, H, t, gradient="adjoint", precision="single"))(a)
    # single precision: within 1e-5 of double (the documented bound of precision="single")
    assert np.max(np.abs(g32 - dense.gradient(c, H, a))) <= 1e-5


def test_a_forked_child_starts_with_an_empty_pool():
    # common practice: state guarded by a lock is reset in a forked child (os.register_at_fork)
    import multiprocessing

    if "fork" not in multiprocessing.get_all_start_methods():
        pytest.skip("no fork start method on this platform")
    scratch.clear()
    scratch.give(np.empty((1, 32), dtype=complex))
    ctx = multiprocessing.get_context("fork")
    with ctx.Pool(1) as pool:
        held = pool.apply(scratch.clear)
    assert held == 0
    assert scratch.clear() == 32 * 16


def test_single_precision_on_thirteen_qubits_reads_its_kept_o_psi_within_the_documented_bound():
    # reference: the shift rule in double precision (another algorithm); 13 qubits take the
    # general backward pass and the memoised Z diagonal with complex64 states
    n = 13
    c = qg.Circuit(n)
    for q in range(n):
        c.ry(q)
    for q in range(n - 1):
        c.cz(q, q + 1)
    H = OBSERVABLES["Z pairs and X"](n) + OBSERVABLES["identity term"](n)
    theta = np.random.default_rng(13).uniform(-3, 3, size=c.n_params)
    ref = grad(lambda t: qg.expect(c, H, t))(theta)
    g32 = grad(lambda t: qg.expect(c, H, t, gradient="adjoint", precision="single"))(theta)
    assert np.max(np.abs(g32 - ref)) <= 1e-5
