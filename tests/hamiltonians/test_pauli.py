"""PauliExpansion algebra and conversions against dense matrices, openfermion and quimb."""

from functools import reduce

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from hamiltonians.pauli import PauliExpansion, pack_bits, unpack_bits

# Pauli matrices (a fact of the trade): the dense reference built by Kronecker products.
SIGMA = {"I": np.eye(2), "X": np.array([[0, 1], [1, 0]]), "Y": np.array([[0, -1j], [1j, 0]]),
         "Z": np.diag([1.0, -1.0])}


def kron_matrix(strings, coeffs):
    n = len(strings[0])
    out = np.zeros((2**n, 2**n), dtype=complex)
    for s, c in zip(strings, coeffs):
        out += c * reduce(np.kron, [SIGMA[ch] for ch in s])
    return out


def pauli_sums(n):
    string = st.text(alphabet="IXYZ", min_size=n, max_size=n)
    coeff = st.complex_numbers(max_magnitude=3, allow_nan=False, allow_infinity=False)
    return st.lists(st.tuples(string, coeff), min_size=1, max_size=6)


@st.composite
def two_sums(draw):
    n = draw(st.integers(1, 4))
    return n, draw(pauli_sums(n)), draw(pauli_sums(n))


@settings(max_examples=60, deadline=None)
@given(two_sums())
def test_algebra_matches_dense(data):
    n, a, b = data
    sa, ca = zip(*a)
    sb, cb = zip(*b)
    pa, pb = PauliExpansion.from_strings(sa, ca), PauliExpansion.from_strings(sb, cb)
    ma, mb = kron_matrix(sa, ca), kron_matrix(sb, cb)
    assert np.allclose(pa.to_dense(), ma)
    assert np.allclose((pa + pb).to_dense(), ma + mb)
    assert np.allclose((pa - 2.5 * pb).to_dense(), ma - 2.5 * mb)
    assert np.allclose((pa * pb).to_dense(), ma @ mb)
    assert np.allclose(pa.adjoint().to_dense(), ma.conj().T)
    assert np.allclose(pa.simplify().to_dense(), ma)
    # Hermiticity: decided away from the tolerance (imaginary parts of combined coefficients
    # either clearly below or clearly above it)
    imag = np.abs(pa.combined().coeffs.imag).max(initial=0)
    if not 1e-10 < imag < 1e-8:
        # rtol=0: numpy's default rtol=1e-5 would call an imaginary part of 1e-6 Hermitian
        assert pa.is_hermitian(1e-9) == np.allclose(ma, ma.conj().T, rtol=0, atol=2e-9)


@settings(max_examples=30, deadline=None)
@given(st.integers(2, 5).flatmap(lambda n: pauli_sums(n)))
def test_openfermion_round_trip_and_sparse(terms):
    from openfermion import get_sparse_operator

    strings, coeffs = zip(*terms)
    p = PauliExpansion.from_strings(strings, coeffs)
    op = p.to_qubit_operator()
    back = PauliExpansion.from_qubit_operator(op, p.n_qubits)
    assert np.allclose(back.to_dense(), p.to_dense())
    # openfermion's own sparse matrix (qubit 0 = most significant, like ours)
    ref = get_sparse_operator(op, n_qubits=p.n_qubits).toarray()
    assert np.allclose(p.to_dense(), ref)


@settings(max_examples=20, deadline=None)
@given(st.integers(2, 5).flatmap(lambda n: pauli_sums(n)))
def test_mpo_matches_dense(terms):
    strings, coeffs = zip(*terms)
    p = PauliExpansion.from_strings(strings, coeffs)
    assert np.allclose(p.to_mpo().to_dense(), kron_matrix(strings, coeffs), atol=1e-9)


def test_product_phases():
    # XY = iZ, YZ = iX, ZX = iY (Pauli algebra, a fact of the trade)
    for a, b, c in [("X", "Y", "Z"), ("Y", "Z", "X"), ("Z", "X", "Y")]:
        prod = (PauliExpansion.from_strings(a) * PauliExpansion.from_strings(b)).simplify()
        assert prod.strings() == [c] and np.isclose(prod.coeffs[0], 1j)


def test_pack_round_trip_many_qubits():
    rng = np.random.default_rng(1)
    bits = rng.random((7, 130)) < 0.5
    assert np.array_equal(unpack_bits(pack_bits(bits), 130), bits)
    p = PauliExpansion.from_bits(bits, bits[::-1], np.arange(7.0))
    q = p * p
    assert q.n_qubits == 130 and q.is_hermitian()


def test_real_and_complex_sparse_types():
    assert PauliExpansion.from_strings(["XX", "YY"], [1, 1]).to_sparse().dtype == float
    assert PauliExpansion.from_strings(["XY"], [1]).to_sparse().dtype == complex


def test_anchor_kept_by_simplify_and_dropped_by_combined():
    a = PauliExpansion.from_local(3, "Z", [[0]], 1.0, anchor=[[0, 1]])
    b = PauliExpansion.from_local(3, "Z", [[0]], 1.0)
    assert len((a + b).simplify()) == 2
    assert len((a + b).combined()) == 1


def test_bad_strings():
    with pytest.raises(ValueError, match="allowed: I, X, Y, Z"):
        PauliExpansion.from_strings(["XQ"])
    with pytest.raises(ValueError, match="same length"):
        PauliExpansion.from_strings(["X", "XX"])
