"""The batched statevector engine against the independent dense reference (tests/reference):
states, expectation values, batches, marginal probabilities, and the memory guard."""
import numpy as np
import pytest
import scipy.linalg
from hypothesis import given, strategies as st

import qgradlib as qg
from qgradlib import engine
from qgradlib.engine import memory
from reference import (circuit_state, dense_expectation, dense_marginals, observable_dense,
                       pauli_dense)

ONE = ["h", "x", "y", "z", "s", "t", "sx", "rx", "ry", "rz", "phase"]
TWO = ["cnot", "cz", "swap", "crx", "cry", "crz", "cphase", "rxx", "ryy", "rzz"]
PARAMETRIC = {"rx", "ry", "rz", "phase", "crx", "cry", "crz", "cphase", "rxx", "ryy", "rzz"}

_rng = np.random.default_rng(20240601)


def _hermitian(d):
    A = _rng.normal(size=(d, d)) + 1j * _rng.normal(size=(d, d))
    return (A + A.conj().T) / 2


# custom gates of every kind, on 1..3 qubits (names differ from the standard ones)
CUSTOM = [
    qg.Gate.from_generator("mixer", _hermitian(4)),
    qg.Gate.from_generator("triad", _hermitian(8)),
    qg.Gate.from_generator("detune", np.diag([0.0, 0.4, -1.3, 2.0])),
    qg.Gate.fixed("entangler", scipy.linalg.expm(-1j * _hermitian(4))),
    qg.Gate.from_hamiltonian("pulse", drift=np.diag([0.3, -0.1, 0.2, -0.4]), drive="XZ"),
    qg.Gate.from_function("twist", lambda a: scipy.linalg.expm(-1j * a * np.array(
        [[0.5, 0.2], [0.2, -0.5]])), 1),
]


@st.composite
def circuits(draw, max_qubits=5):
    """A circuit using every standard gate that fits, in random order on random qubits,
    with new, shared-and-scaled, and fixed angles; and a seed for its parameters."""
    n = draw(st.integers(1, max_qubits))
    names = ONE + (TWO if n >= 2 else [])
    names = draw(st.permutations(names)) + draw(st.lists(st.sampled_from(names), max_size=4))
    customs = [g for g in CUSTOM if g.n_qubits <= n]
    c = qg.Circuit(n)
    for item in names + draw(st.lists(st.sampled_from(customs), max_size=3)):
        k = {True: 1, False: 2}[item in ONE] if isinstance(item, str) else item.n_qubits
        qubits = tuple(draw(st.permutations(range(n)))[:k])
        kw = {}
        if (item in PARAMETRIC if isinstance(item, str) else item.parametric):
            mode = draw(st.sampled_from(["new", "new", "shared", "fixed"]))
            if mode == "shared" and c.n_params:
                kw = dict(param=draw(st.integers(0, c.n_params - 1)),
                          scale=draw(st.sampled_from([1.0, -2.0, 0.5])),
                          offset=draw(st.sampled_from([0.0, 0.3])))
            elif mode == "fixed":
                kw = dict(angle=draw(st.floats(-7, 7)))
        if isinstance(item, str):
            getattr(c, item)(*qubits, **kw)
        else:
            c.add(item, qubits, **kw)
    return c, draw(st.integers(0, 2**32 - 1))


def _theta(c, seed, batch=None):
    rng = np.random.default_rng(seed)
    shape = (c.n_params,) if batch is None else (batch, c.n_params)
    return rng.uniform(-np.pi, np.pi, size=shape)


def _pauli_terms(n, rng, k=4):
    words = ["".join(rng.choice(list("IXYZ"), size=n)) for _ in range(k)]
    return {w: float(rng.normal()) for w in words}


@given(circuits())
def test_state_matches_dense_reference(case):
    c, seed = case
    theta = _theta(c, seed)
    psi = qg.state(c, theta)
    assert psi.shape == (2 ** c.n_qubits,) and psi.dtype == np.complex128
    np.testing.assert_allclose(psi, circuit_state(c, theta), atol=1e-10)


@given(circuits())
def test_expectations_match_dense_reference(case):
    c, seed = case
    n, rng = c.n_qubits, np.random.default_rng(seed + 1)
    theta = _theta(c, seed)
    ref = circuit_state(c, theta)
    terms = _pauli_terms(n, rng)
    pauli = qg.Observable(terms)
    D = rng.normal(size=(2 ** n, 2 ** n)) + 1j * rng.normal(size=(2 ** n, 2 ** n))
    D = D + D.conj().T
    dense = qg.Observable.from_matrix(D)
    mixed = pauli + dense
    # Pauli terms by index arithmetic vs the kron-built matrix
    exact_p = dense_expectation(ref, observable_dense(terms, n))
    assert np.isclose(qg.expect(c, pauli, theta), exact_p, atol=1e-10)
    for word in terms:
        assert np.isclose(qg.expect(c, qg.Observable({word: 1.0}), theta),
                          dense_expectation(ref, pauli_dense(word)), atol=1e-10)
    exact_d = dense_expectation(ref, D)
    vals = qg.expect(c, [pauli, dense, mixed], theta)
    assert vals.shape == (3,)
    np.testing.assert_allclose(vals, [exact_p, exact_d, exact_p + exact_d], atol=1e-9)


@given(circuits(max_qubits=4), st.integers(1, 4))
def test_batches_match_loops(case, B):
    c, seed = case
    thetas = _theta(c, seed, batch=B)
    if B > 2:
        thetas[1] = thetas[0]          # repeated rows share one matrix in the engine
    rng = np.random.default_rng(seed)
    obs = [qg.Observable(_pauli_terms(c.n_qubits, rng)), qg.Observable({"Z" * c.n_qubits: 1.0})]
    qubits = list(rng.permutation(c.n_qubits))[: max(1, c.n_qubits - 1)]
    psi = qg.state(c, thetas)
    vals = qg.expect(c, obs, thetas)
    single = qg.expect(c, obs[0], thetas)
    probs = qg.probabilities(c, thetas, qubits=qubits)
    assert psi.shape == (B, 2 ** c.n_qubits) and vals.shape == (B, 2) and single.shape == (B,)
    assert probs.shape == (B, 2 ** len(qubits))
    for b in range(B):
        np.testing.assert_allclose(psi[b], qg.state(c, thetas[b]), atol=1e-12)
        np.testing.assert_allclose(psi[b], circuit_state(c, thetas[b]), atol=1e-10)
        np.testing.assert_allclose(vals[b], qg.expect(c, obs, thetas[b]), atol=1e-12)
        assert np.isclose(single[b], vals[b, 0], atol=1e-12)
        np.testing.assert_allclose(probs[b], qg.probabilities(c, thetas[b], qubits=qubits),
                                   atol=1e-12)


@given(circuits(), st.data())
def test_marginal_probabilities_any_qubit_order(case, data):
    c, seed = case
    n = c.n_qubits
    theta = _theta(c, seed)
    ref = circuit_state(c, theta)
    qubits = data.draw(st.permutations(range(n)))[: data.draw(st.integers(1, n))]
    p = qg.probabilities(c, theta, qubits=qubits)
    np.testing.assert_allclose(p, dense_marginals(ref, n, qubits), atol=1e-10)
    np.testing.assert_allclose(qg.probabilities(c, theta), np.abs(ref) ** 2, atol=1e-10)
    assert np.isclose(p.sum(), 1.0)


def test_marginal_order_first_listed_is_most_significant():
    # qubit 1 set, qubit 0 clear: over [1, 0] the outcome is 0b10 = 2, over [0, 1] it is 1
    c = qg.Circuit(3).x(1)
    none = np.zeros(0)
    assert qg.probabilities(c, none, qubits=[1, 0]).tolist() == [0, 0, 1, 0]
    assert qg.probabilities(c, none, qubits=[0, 1]).tolist() == [0, 1, 0, 0]
    assert np.argmax(qg.probabilities(c, none)) == 0b010


def test_memory_chunks_give_the_same_answers():
    c = qg.Circuit(3).h(0).ry(1).cnot(0, 2).crx(2, 1).rzz(0, 1)
    thetas = np.random.default_rng(3).normal(size=(7, c.n_params))
    obs = qg.Observable({"XYZ": 0.5, "ZIZ": -1.0})
    np.testing.assert_allclose(qg.expect(c, obs, thetas, memory=1),
                               qg.expect(c, obs, thetas), atol=1e-14)


def test_many_qubits_limited_only_by_memory():
    # common practice: H then a CNOT chain makes (|0...0> + |1...1>)/sqrt(2)
    n = 18
    c = qg.Circuit(n).h(0)
    for q in range(n - 1):
        c.cnot(q, q + 1)
    psi = qg.state(c, np.zeros(0))
    nz = np.flatnonzero(np.abs(psi) > 1e-12)
    assert nz.tolist() == [0, 2 ** n - 1]
    np.testing.assert_allclose(psi[nz], [2 ** -0.5] * 2, atol=1e-14)
    assert np.isclose(qg.expect(c, qg.Observable({"Z" * n: 1.0}), np.zeros(0)), 1.0)


@pytest.mark.parametrize("call", ["expect", "probabilities", "state", "sample", "engine"])
def test_memory_guard_names_bytes_needed_and_available(monkeypatch, call):
    monkeypatch.setattr(memory, "available_bytes", lambda: 1000)
    monkeypatch.setattr(memory, "_recent", [0.0, -1, None])     # no earlier reading to reuse
    n = 8                                           # 2**8 amplitudes * 16 bytes = 4,096 bytes
    c = qg.Circuit(n).h(0)
    run = {
        "expect": lambda: qg.expect(c, qg.Observable({"Z" * n: 1.0}), np.zeros(0)),
        "probabilities": lambda: qg.probabilities(c, np.zeros(0)),
        "state": lambda: qg.state(c, np.zeros(0)),
        "sample": lambda: qg.sample(c, np.zeros(0), shots=5, seed=0),
        "engine": lambda: engine.zero_states(n, 1),
    }[call]
    with pytest.raises(ValueError, match=r"needs [0-9,]+ bytes .* only 1,000 bytes .* available") as info:
        run()
    # at least one state, and the call's overhead where the estimate covers a whole call
    needed = int(str(info.value).split(" needs ")[1].split(" bytes")[0].replace(",", ""))
    assert needed >= 4096


def test_memory_guard_refuses_an_impossible_state():
    # 2**60 amplitudes is 16 EiB: more than any machine; refused before allocating
    with pytest.raises(memory.StateTooLarge, match="60 qubits at once"):
        qg.state(qg.Circuit(60).h(0), np.zeros(0))
