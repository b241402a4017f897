"""PauliExpansion algebra and conversions against dense matrices, openfermion and quimb."""

from functools import reduce

import numpy as np
import pytest
from hypothesis import example, given, settings
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


# ------------------------------------------------- sparse matrices with cancellations
# Coefficients whose sums cancel exactly or only up to rounding (0.1 + 0.2 - 0.3 != 0 in
# binary floating point): where to_sparse once counted and filled a row differently.
UNITS = [0.1, 0.3, 0.7, 1 / 3]
MULTIPLES = [-2, -1, 1, 2, 3]
TRICKY = [0.1, 0.2, -0.3, 0.6, -0.7, 1e-3, 1.0]
SAME_X = {"I": "Z", "Z": "I", "X": "Y", "Y": "X"}  # toggles the z bit, keeps the x bit


def toggled(s, toggles):
    return "".join(SAME_X[ch] if t else ch for ch, t in zip(s, toggles))


@st.composite
def cancelling_sums(draw):
    """A Pauli sum with one large group of strings sharing an x mask (coefficients: small
    multiples of one unit, so that many rows sum to zero exactly or up to rounding), a few
    other strings, and pairs c, -c on strings of equal x mask."""
    n = draw(st.integers(3, 7))
    base = draw(st.text(alphabet="IXYZ", min_size=n, max_size=n))
    unit = draw(st.sampled_from(UNITS))
    toggles = st.lists(st.booleans(), min_size=n, max_size=n)
    group = draw(st.lists(st.tuples(toggles, st.sampled_from(MULTIPLES)), min_size=4, max_size=12))
    terms = [(toggled(base, t), unit * m) for t, m in group]
    others = draw(st.lists(st.tuples(st.text(alphabet="IXYZ", min_size=n, max_size=n),
                                     st.sampled_from(TRICKY), st.sampled_from([1, 1j]),
                                     st.one_of(st.none(), toggles)), max_size=6))
    for s, c, phase, partner in others:
        terms.append((s, c * phase))
        if partner is not None:  # -c on another string of the same x mask
            terms.append((toggled(s, partner), -c * phase))
    return n, terms


def openfermion_matrix(strings, coeffs, n):
    """openfermion.get_sparse_operator of the QubitOperator written directly from the strings.

    openfermion's qubit 0 is the first (leftmost) Kronecker factor, i.e. the most
    significant bit of the basis index, as ours (openfermion qubit_operator_sparse).
    """
    from openfermion import QubitOperator, get_sparse_operator

    op = QubitOperator()
    for s, c in zip(strings, coeffs):
        op += QubitOperator(" ".join(f"{ch}{q}" for q, ch in enumerate(s) if ch != "I"), c)
    return get_sparse_operator(op, n_qubits=n)


def quimb_matrix(strings, coeffs):
    """Sum of quimb.kron products of quimb.pauli sparse matrices (qubit 0 leftmost)."""
    import quimb as qu

    return sum(c * qu.kron(*[qu.pauli(ch, sparse=True) for ch in s]) for s, c in zip(strings, coeffs))


CHAIN4_TERMS = (4, [("ZZII", 0.6), ("IZZI", 0.6), ("IIZZ", 0.6), ("ZIII", -0.3), ("IZII", -0.3),
                    ("IIZI", -0.3), ("IIIZ", -0.3), ("XXII", 0.7), ("IXXI", 0.7), ("IIXX", 0.7),
                    ("XIII", 0.1), ("IXII", 0.1), ("IIXI", 0.1), ("IIIX", 0.1)])


@settings(max_examples=80, deadline=None)
@given(cancelling_sums(), st.sampled_from([1, 4, 1 << 13]))
# found by this test (1000 examples) against the former two-pass to_sparse, which crashed
@example((5, [("YYYYI", -0.2), ("YYYYI", 0.1), ("YYXXI", -0.2), ("YXYYZ", 0.1 * 3), ("YXXXI", -0.1),
              ("YXXYI", -0.1), ("XYYYI", -0.2)]), 4)
@example(CHAIN4_TERMS, 1 << 13)  # the custom chain below
def test_sparse_with_cancellations_matches_openfermion_and_quimb(data, chunk):
    n, terms = data
    strings, coeffs = zip(*terms)
    mat = PauliExpansion.from_strings(strings, coeffs).to_sparse(chunk=chunk)
    mat.check_format(full_check=True)
    canonical = mat.copy()
    canonical.sum_duplicates()
    assert canonical.nnz == mat.nnz  # one stored entry per (row, column)
    ours = mat.toarray()
    # entry by entry; the references round differently, hence the tolerance
    assert np.abs(ours - openfermion_matrix(strings, coeffs, n).toarray()).max() < 1e-12
    assert np.abs(ours - quimb_matrix(strings, coeffs).toarray()).max() < 1e-12


CHAIN4_SPEC = """
[lattice]
kind = "chain"
size = [4]
boundary = "open"

[model]
kind = "custom"

[[model.term]]
pauli = "ZZ"
on = "bonds"
coefficient = 0.6

[[model.term]]
pauli = "Z"
on = "sites"
coefficient = -0.3

[[model.term]]
pauli = "XX"
on = "bonds"
coefficient = 0.7

[[model.term]]
pauli = "X"
on = "sites"
coefficient = 0.1
"""


def test_custom_chain_with_cancelling_diagonal_builds():
    # regression: these terms made to_sparse crash with a numpy broadcast error
    import scipy.linalg
    import scipy.sparse.linalg as spla

    from hamiltonians.spec import parse_spec

    ham = parse_spec(CHAIN4_SPEC, "chain4.toml").build().hamiltonian
    ref = kron_matrix(ham.strings(), ham.coeffs)
    mat = ham.to_sparse()
    assert np.abs(mat.toarray() - ref).max() < 1e-12
    # ground energy: scipy's dense eigvalsh of the Kronecker-built matrix
    e0 = spla.eigsh(mat, k=1, which="SA", v0=np.ones(16), tol=1e-12)[0][0]
    assert abs(e0 - scipy.linalg.eigvalsh(ref)[0]) < 1e-10


def tfim_chain(n, J, h, boundary):
    from hamiltonians import build_lattice
    from hamiltonians.models import tfim

    return tfim(build_lattice("chain", [n], boundary=boundary), J=J, h=h)


@pytest.mark.parametrize("n, J, h, boundary", [(8, -1.0, 0.7, "open"), (8, 1.0, 0.3, "periodic"),
                                               (10, 1.0, 0.1, "open")])
def test_tfim_square_matches_dense_square(n, J, h, boundary):
    # regression: (H*H).combined() had an entry off by 28.9 (n=8 open) or crashed (periodic);
    # reference: the square of the dense matrix built by Kronecker products
    ham = tfim_chain(n, J, h, boundary)
    dense = kron_matrix(ham.strings(), ham.coeffs)
    square = (ham * ham).combined().to_sparse()
    assert np.abs(square.toarray() - dense @ dense).max() < 1e-9


def test_quench_energy_variance_is_conserved():
    # <H^2> - <H>^2 is conserved under exp(-iHt) (H commutes with itself). From |0...0>,
    # H|0..0> = E0|0..0> + (field) sum_i |flip i>, so the variance is n h^2 at every time
    # (elementary quantum mechanics). Evolution: scipy expm_multiply.
    from scipy.sparse.linalg import expm_multiply

    n, h = 8, 0.7
    ham = tfim_chain(n, -1.0, h, "open")
    mat, square = ham.to_sparse(), (ham * ham).combined().to_sparse()
    psi0 = np.zeros(2**n, dtype=complex)
    psi0[0] = 1.0
    states = expm_multiply(-1j * mat, psi0, start=0.0, stop=2.0, num=9, endpoint=True)
    energy = np.einsum("ti,ti->t", states.conj(), (mat @ states.T).T).real
    second = np.einsum("ti,ti->t", states.conj(), (square @ states.T).T).real
    assert np.abs(second - energy**2 - n * h**2).max() < 1e-9
