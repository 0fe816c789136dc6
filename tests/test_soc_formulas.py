"""Spin-adapted singlet-triplet spin-orbit formulas against brute-force determinant algebra.

The reference here is independent of surfcross's formulas: second quantization on bit-string
determinants (Slater's rules done by the computer), the triplet sublevels M = +1, -1 made by
the spin ladder operators from M = 0 (Condon-Shortley convention, S+-|S, M> =
sqrt(S(S+1) - M(M+-1)) |S, M+-1>; common practice), and the Breit-Pauli two-electron
spin-orbit operator written out in spin orbitals.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from surfcross.analysis.spin_orbit import (reference_triplet_vector, shell_levels,
                                           singlet_triplet_vector, sublevel_elements)

# ----------------------------------------------------------------- determinant algebra
# spin orbital 2p is p alpha, 2p + 1 is p beta; a determinant is a bit string


def _annihilate(det: int, so: int) -> tuple[int, int] | None:
    if not det >> so & 1:
        return None
    sign = -1 if bin(det & ((1 << so) - 1)).count("1") % 2 else 1
    return sign, det ^ (1 << so)


def _create(det: int, so: int) -> tuple[int, int] | None:
    if det >> so & 1:
        return None
    sign = -1 if bin(det & ((1 << so) - 1)).count("1") % 2 else 1
    return sign, det | (1 << so)


def _apply_string(ops: list[tuple[str, int]], vec: dict[int, complex]) -> dict[int, complex]:
    """Apply a product of operators (rightmost first) to a determinant expansion."""
    out: dict[int, complex] = {}
    for det, c in vec.items():
        sign, d = 1, det
        for kind, so in reversed(ops):
            r = _create(d, so) if kind == "+" else _annihilate(d, so)
            if r is None:
                break
            sign *= r[0]
            d = r[1]
        else:
            out[d] = out.get(d, 0) + sign * c
    return out


def _add(target: dict[int, complex], vec: dict[int, complex], factor: complex) -> None:
    for d, c in vec.items():
        target[d] = target.get(d, 0) + factor * c


def _dot(bra: dict[int, complex], ket: dict[int, complex]) -> complex:
    return sum(np.conj(c) * ket.get(d, 0) for d, c in bra.items())


def _one_body(matrix: np.ndarray, vec: dict[int, complex]) -> dict[int, complex]:
    """sum_PQ matrix[P, Q] a+_P a_Q |vec> over spin orbitals."""
    out: dict[int, complex] = {}
    for p, q in zip(*np.nonzero(np.abs(matrix) > 1e-15)):
        _add(out, _apply_string([("+", int(p)), ("-", int(q))], vec), matrix[p, q])
    return out


SIGMA = (np.array([[0, 1], [1, 0]], complex) / 2, np.array([[0, -1j], [1j, 0]]) / 2,
         np.array([[1, 0], [0, -1]], complex) / 2)


def _spin_orbital(a: np.ndarray) -> np.ndarray:
    """sum_k h_k s_k with h_k = i a_k as a matrix over spin orbitals."""
    return sum(np.kron(1j * a[k], SIGMA[k]) for k in range(3))


def _reference(nocc: int) -> dict[int, complex]:
    return {(1 << (2 * nocc)) - 1: 1.0}


def _excited(x: np.ndarray, nocc: int, beta_sign: float) -> dict[int, complex]:
    """sum_ia X_ia (a+_a,alpha a_i,alpha + beta_sign a+_a,beta a_i,beta) |0>."""
    out: dict[int, complex] = {}
    ref = _reference(nocc)
    for i, a in zip(*np.nonzero(x)):
        va = 2 * (nocc + int(a))
        _add(out, _apply_string([("+", va), ("-", 2 * int(i))], ref), x[i, a])
        _add(out, _apply_string([("+", va + 1), ("-", 2 * int(i) + 1)], ref), beta_sign * x[i, a])
    return out


def _ladder(vec: dict[int, complex], nmo: int, up: bool) -> dict[int, complex]:
    out: dict[int, complex] = {}
    for p in range(nmo):
        ops = [("+", 2 * p), ("-", 2 * p + 1)] if up else [("+", 2 * p + 1), ("-", 2 * p)]
        _add(out, _apply_string(ops, vec), 1.0)
    return out


def _triplet_sublevels(x: np.ndarray, nocc: int, nmo: int) -> dict[int, dict[int, complex]]:
    t0 = _excited(x, nocc, -1.0)
    up = {d: c / math.sqrt(2) for d, c in _ladder(t0, nmo, True).items()}
    down = {d: c / math.sqrt(2) for d, c in _ladder(t0, nmo, False).items()}
    return {-1: down, 0: t0, 1: up}


def _random_case(seed: int, nocc: int = 2, nvir: int = 3):
    rng = np.random.default_rng(seed)
    nmo = nocc + nvir
    a = rng.standard_normal((3, nmo, nmo))
    a = a - a.transpose(0, 2, 1)

    def amplitudes():
        x = rng.standard_normal((nocc, nvir))
        return x * math.sqrt(0.5 / (x ** 2).sum())
    return a, amplitudes(), amplitudes(), nocc, nmo


# ----------------------------------------------------------------- one-electron formulas
@pytest.mark.parametrize("seed", [1, 2, 3])
def test_singlet_triplet_elements_match_determinants(seed):
    a, xs, xt, nocc, nmo = _random_case(seed)
    h = _spin_orbital(a)
    singlet = _excited(xs, nocc, 1.0)
    sublevels = _triplet_sublevels(xt, nocc, nmo)
    for ms in sublevels.values():  # the ladder operators keep the norm: |T, M> normalized
        assert abs(_dot(ms, ms) - 1.0) < 1e-12
    assert abs(_dot(singlet, singlet) - 1.0) < 1e-12
    brute = np.array([_dot(singlet, _one_body(h, sublevels[m])) for m in (-1, 0, 1)])
    ours = sublevel_elements(singlet_triplet_vector(a, nocc, xs, xt))
    np.testing.assert_allclose(ours, brute, atol=1e-12)


@pytest.mark.parametrize("seed", [4, 5])
def test_reference_triplet_elements_match_determinants(seed):
    a, _, xt, nocc, nmo = _random_case(seed)
    h = _spin_orbital(a)
    ref = _reference(nocc)
    sublevels = _triplet_sublevels(xt, nocc, nmo)
    brute = np.array([_dot(ref, _one_body(h, sublevels[m])) for m in (-1, 0, 1)])
    z = reference_triplet_vector(a, nocc, xt)
    ours = sublevel_elements(z)
    np.testing.assert_allclose(ours, brute, atol=1e-12)
    # sublevel sum: sum_M |<S0|H|T, M>|^2 = |z|^2
    assert abs((np.abs(ours) ** 2).sum() - (z ** 2).sum()) < 1e-12


def test_p_shell_two_state_model_known_answer():
    """Two electrons, orbitals p_x (doubly occupied) and p_y, h = zeta l (real p basis).

    With <p_x|l_z|p_y> = -i (common practice: l_z p_x = i p_y, l_z p_y = -i p_x), the
    singlet |p_x^2> couples only to the M = 0 sublevel of 3(p_x p_y), with
    <S0|H|T, 0> = -i zeta / sqrt(2), and not at all to M = +-1 (hand calculation).
    """
    zeta = 0.37
    a = np.zeros((3, 2, 2))
    a[2, 0, 1], a[2, 1, 0] = -zeta, zeta  # h_z = i a_z = zeta l_z in (p_x, p_y)
    xt = np.array([[math.sqrt(0.5)]])
    ours = sublevel_elements(reference_triplet_vector(a, 1, xt))
    np.testing.assert_allclose(ours, [0.0, -1j * zeta / math.sqrt(2), 0.0], atol=1e-15)


def test_same_excitation_singlet_and_triplet_do_not_couple():
    """A singlet and a triplet of the same orbital excitation have zero coupling for any
    spin-orbit operator (a real orbital has no orbital angular momentum expectation value;
    common practice, the root of El-Sayed's rule)."""
    a, xs, _, nocc, _ = _random_case(7)
    np.testing.assert_allclose(singlet_triplet_vector(a, nocc, xs, xs), 0.0, atol=1e-13)


def test_p_shell_levels():
    """zeta l.s in a p shell: j = 1/2 at -zeta (twice), j = 3/2 at +zeta/2 (four times)
    (Landé interval rule; common practice)."""
    zeta = 0.2
    lz = np.array([[0, -1, 0], [1, 0, 0], [0, 0, 0]], float)  # a_z in (p_x, p_y, p_z)
    lx = np.array([[0, 0, 0], [0, 0, -1], [0, 1, 0]], float)
    ly = np.array([[0, 0, 1], [0, 0, 0], [-1, 0, 0]], float)
    levels = shell_levels(zeta * np.array([lx, ly, lz]))
    np.testing.assert_allclose(levels, [-zeta, -zeta] + [zeta / 2] * 4, atol=1e-14)
