"""Dense reference datasets: the fast bitmask and reshape kernels against plain Kronecker-product matrices.

The yardstick is numpy alone: every Pauli string is built as a dense
``numpy.kron`` product and every expectation is <psi|P|psi>; reduced
density matrices are partial traces of |psi><psi| by ``numpy.einsum``.
"""

from collections import namedtuple
from functools import reduce

import numpy as np
import pytest

from hamiltonians.spec import parse_spec
from manybody.errors import InputError
from manybody.references import exact, parse_time_grid, reference
from manybody.references.dataset import reference_dataset
from manybody.schema import term_table

Subsystem = namedtuple("Subsystem", "label sites")
SIGMA = {"X": np.array([[0, 1], [1, 0]]), "Y": np.array([[0, -1j], [1j, 0]]), "Z": np.diag([1.0, -1.0])}
CODE_LETTER = "IXZY"  # one-qubit codes of manybody.schema.term_table


def model_of(lattice: str, model: str) -> object:
    return parse_spec(f"[lattice]\n{lattice}\n[model]\n{model}\n").build()


def kron_string(letters: dict, n: int) -> np.ndarray:
    return reduce(np.kron, [SIGMA[letters[q]] if q in letters else np.eye(2) for q in range(n)])


def rdm(psi, qubits, n):
    """Partial trace by einsum (numpy), qubits kept in increasing order."""
    t = psi.reshape((2,) * n)
    keep = sorted(qubits)
    letters = [chr(97 + q) for q in range(n)]
    bra = [chr(65 + q) if q in keep else letters[q] for q in range(n)]
    out = "".join(letters[q] for q in keep) + "".join(bra[q] for q in keep)
    rho = np.einsum(f"{''.join(letters)},{''.join(bra)}->{out}", t, t.conj())
    return rho.reshape(2 ** len(keep), 2 ** len(keep))


def kron_reference(model, psi, subsystems):
    """Energy, variance, magnetization, correlations, MI and purities from dense numpy matrices."""
    n = model.n_qubits
    codes, coeffs, density = term_table(model.hamiltonian, model.qubit_site, model.n_sites)
    values = np.array([np.vdot(psi, kron_string({q: CODE_LETTER[c] for q, c in enumerate(row) if c}, n) @ psi).real
                       for row in codes])
    h = sum(c * kron_string({q: CODE_LETTER[k] for q, k in enumerate(row) if k}, n) for row, c in zip(codes, coeffs))
    energy = np.vdot(psi, h @ psi).real
    out = {"energy": energy, "energy_density": values @ density,
           "energy_variance": np.vdot(h @ psi, h @ psi).real - energy**2}
    if n == model.n_sites:
        mag = np.array([[np.vdot(psi, kron_string({q: a}, n) @ psi).real for q in range(n)] for a in "XYZ"])
        corr = np.full((3, 3, n, n), np.nan)
        for i, a in enumerate("XYZ"):
            for j, b in enumerate("XYZ"):
                for q in range(n):
                    for r in range(n):
                        if q != r:
                            corr[i, j, q, r] = np.vdot(psi, kron_string({q: a, r: b}, n) @ psi).real
        pur = lambda qs: np.trace(np.linalg.matrix_power(rdm(psi, qs, n), 2)).real  # noqa: E731
        mi = np.array([[np.nan if q == r else np.log(pur([q, r]) / (pur([q]) * pur([r]))) for r in range(n)]
                       for q in range(n)])
        out.update(magnetization=mag, correlation=corr, mutual_information=mi,
                   connected_correlation=corr - mag[:, None, :, None] * mag[None, :, None, :])
    qubit_site = np.asarray(model.qubit_site)
    out["purity"] = np.array([np.trace(np.linalg.matrix_power(
        rdm(psi, list(np.flatnonzero(np.isin(qubit_site, s.sites))), n), 2)).real for s in subsystems])
    return out


def random_state(n, seed):
    rng = np.random.default_rng(seed)
    psi = rng.standard_normal(2**n) + 1j * rng.standard_normal(2**n)
    return psi / np.linalg.norm(psi)


CASES = [
    ('kind = "chain"\nsize = [7]\nboundary = "periodic"', 'kind = "xxz"\nDelta = 0.6\nh = 0.4'),
    ('kind = "ladder"\nsize = [3]', 'kind = "tfim"\nh = 0.8'),
    ('kind = "chain"\nsize = [3]', 'kind = "hubbard"\nU = 3.0'),
]


@pytest.mark.parametrize("lattice,model", CASES)
def test_dataset_matches_kronecker_products(lattice, model):
    m = model_of(lattice, model)
    psi = random_state(m.n_qubits, 5)
    subsystems = [Subsystem("0-1", (0, 1)), Subsystem("0,2", (0, 2)), Subsystem("1", (1,))]
    ds = reference_dataset(m, psi, subsystems, {"time": 0.5})
    ref = kron_reference(m, psi, subsystems)
    for name, value in ref.items():
        got = ds[name].values
        assert np.array_equal(np.isnan(got), np.isnan(value)), name
        assert np.allclose(np.nan_to_num(got), np.nan_to_num(value), atol=1e-10, rtol=0), name
    assert np.allclose(ds.renyi2, -np.log(ref["purity"]), atol=1e-10)
    assert ds.attrs == {"kind": "exact reference", "tool_version": ds.attrs["tool_version"], "label": "{'time': 0.5}"}
    assert set(ds.data_vars) == set(ref) | {"renyi2"} | ({"structure_factor"} if "periodic" in lattice else set())


def test_energy_variance_and_pauli_kernels_on_complex_terms():
    # Terms with a single Y have imaginary matrices: a transposed H would give a different ||H psi||.
    from hamiltonians.pauli import PauliExpansion

    ham = PauliExpansion.from_strings(["YIIX", "IXYI", "ZIIY", "XZYI"], [0.7, -1.1, 0.4, 0.3])
    psi = random_state(4, 2)
    h = sum(c * kron_string({q: s for q, s in enumerate(w) if s != "I"}, 4)
            for w, c in zip(["YIIX", "IXYI", "ZIIY", "XZYI"], [0.7, -1.1, 0.4, 0.3]))
    e = np.vdot(psi, h @ psi).real
    assert np.isclose(exact.energy_variance(ham, psi), np.vdot(h @ psi, h @ psi).real - e**2, atol=1e-12)
    assert np.allclose(exact.apply_pauli_sum(ham, psi), h @ psi, atol=1e-12)


def test_subsystem_purity_either_side():
    # tr rho_A^2 = tr rho_B^2 for a pure state (Schmidt decomposition, a fact of the trade)
    psi = random_state(9, 1)
    for qubits in ([0], [2, 5], [0, 1, 2, 3, 4, 7, 8]):
        rest = [q for q in range(9) if q not in qubits]
        assert np.isclose(exact.subsystem_purity(psi, qubits), exact.subsystem_purity(psi, rest), atol=1e-12)
        assert np.isclose(exact.subsystem_purity(psi, qubits),
                          np.trace(np.linalg.matrix_power(rdm(psi, qubits, 9), 2)).real, atol=1e-12)


def test_reference_entry_point_dense_quench():
    # a quench series: one dataset per time along a `time` dimension; t = 0 is the product state itself
    m = model_of('kind = "chain"\nsize = [6]', 'kind = "tfim"\nh = 1.0')
    ds = reference(m, "zero", times=[0.0, 0.5, 1.0], subsystems=[Subsystem("0-2", (0, 1, 2))])
    assert list(ds.time.values) == [0.0, 0.5, 1.0]
    assert ds.attrs["method"] == "expm_multiply"
    assert np.allclose(ds.magnetization.sel(axis="Z", time=0.0), 1.0)
    assert np.isclose(float(ds.purity.sel(time=0.0)[0]), 1.0)
    # energy and variance are conserved by the unitary evolution
    assert np.allclose(ds.energy, -5.0, atol=1e-10) and np.allclose(ds.energy_variance, 6.0, atol=1e-10)
    psi = exact.evolve(m.hamiltonian, exact.product_state("0" * 6), [1.0])[0]
    one = reference_dataset(m, psi, [Subsystem("0-2", (0, 1, 2))])
    assert np.allclose(ds.correlation.sel(time=1.0).fillna(0), one.correlation.fillna(0), atol=1e-12)


def test_reference_ground_state_dense():
    m = model_of('kind = "chain"\nsize = [8]', 'kind = "heisenberg"')
    ds = reference(m, "ground")
    e0, _ = exact.ground_state(m.hamiltonian)
    assert ds.attrs["method"] == "exact diagonalization"
    assert np.isclose(float(ds.energy), e0, atol=1e-10) and abs(float(ds.energy_variance)) < 1e-8


@pytest.mark.parametrize("text,expected", [("0,0.5,1", [0.0, 0.5, 1.0]), ("0:3:121", list(np.linspace(0, 3, 121))),
                                           ("1:2:2", [1.0, 2.0]), (" 2 ", [2.0])])
def test_parse_time_grid(text, expected):
    assert np.allclose(parse_time_grid(text), expected)


@pytest.mark.parametrize("text", ["0,nan", "inf", "-1,0", "1,0.5", "0:3:1", "3:0:4", "0:1", "a,b", "", "0,0"])
def test_parse_time_grid_rejects(text):
    with pytest.raises(InputError, match="--times"):
        parse_time_grid(text)


def test_reference_rejects_bad_input():
    m = model_of('kind = "chain"\nsize = [4]', 'kind = "tfim"')
    with pytest.raises(InputError, match="method"):
        reference(m, "ground", method="magic")
    with pytest.raises(InputError, match="state"):
        reference(m, np.ones(8))
    big = model_of('kind = "square"\nsize = [5, 5]', 'kind = "tfim"')
    with pytest.raises(InputError, match="not a chain or ladder"):
        reference(big, "zero")


def test_pauli_moments_in_qubit_blocks_equal_one_block():
    # Large states build the Gram matrix block by block; any block size must give the same numbers.
    psi = random_state(8, 4)
    mag, corr = exact.local_pauli_moments(psi)
    for max_bytes in (1, 3 * 16 * 256 * 3):  # one qubit per block, three qubits per block
        m, c = exact.local_pauli_moments(psi, max_bytes=max_bytes)
        assert np.allclose(m, mag, atol=1e-14)
        assert np.array_equal(np.isnan(c), np.isnan(corr)) and np.allclose(np.nan_to_num(c), np.nan_to_num(corr))
    assert np.isclose(corr[2, 0, 1, 6], np.vdot(psi, kron_string({1: "Z", 6: "X"}, 8) @ psi).real, atol=1e-12)
