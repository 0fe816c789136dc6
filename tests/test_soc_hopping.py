"""Landau-Zener hop estimate: a worked example in SI units, the exact two-state dynamics
(scipy's ODE integrator as the outside reference), and the limits of the formula."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import constants
from scipy.integrate import solve_ivp

from surfcross.analysis.hopping import (HOP_CAVEATS, hop_at_crossing, landau_zener_hop)
from surfcross.analysis.spin_orbit import SpinOrbitCouplings, make_pair
from surfcross.engine.base import Evaluation, StateInfo
from surfcross.errors import InputError
from surfcross.geometry import Geometry
from surfcross.states import parse_state
from surfcross.units import AMU_IN_ELECTRON_MASS, HARTREE_IN_WAVENUMBER


def _stretch(d: float) -> tuple[np.ndarray, np.ndarray]:
    """Gradient difference d along a bond of a diatomic (atom 1 +z, atom 2 -z)."""
    ga = np.array([[0.0, 0.0, d / 2], [0.0, 0.0, -d / 2]])
    return ga, -ga


def test_worked_example_in_si_units():
    """Hand calculation with CODATA constants in SI (scipy.constants), independent of the
    atomic units inside surfcross: CO-like masses, H_SO = 50 cm^-1, |g_a - g_b| per atom
    0.05 Eh/bohr, 298.15 K."""
    m1, m2 = 12.000, 15.995  # amu
    coupling_cm, d, temperature = 50.0, 0.05, 298.15
    ga, gb = _stretch(d)
    hop = landau_zener_hop(coupling_cm, ga, gb, [m1, m2], temperature_k=temperature)
    amu = constants.physical_constants["atomic mass constant"][0]
    e_h = constants.physical_constants["Hartree energy"][0]
    a0 = constants.physical_constants["Bohr radius"][0]
    # Cartesian unit direction (0,0,1, 0,0,-1)/sqrt(2): effective mass 2 m1 m2 / (m1 + m2)
    mass = 2 * m1 * m2 / (m1 + m2) * amu
    speed = math.sqrt(2 * constants.k * temperature / mass)
    slope = d * math.sqrt(2) * e_h / a0  # J/m
    h_so = coupling_cm * 100 * constants.h * constants.c  # J
    gamma = 2 * math.pi * h_so ** 2 / (constants.hbar * speed * slope)
    assert hop.reduced_mass_amu == pytest.approx(mass / amu, rel=1e-10)
    assert hop.velocity_m_s == pytest.approx(speed, rel=1e-8)
    assert hop.exponent == pytest.approx(gamma, rel=1e-8)
    assert hop.single_pass == pytest.approx(1 - math.exp(-gamma), rel=1e-8)
    assert hop.double_pass == pytest.approx(1 - math.exp(-2 * gamma), rel=1e-8)
    assert hop.single_pass_from_triplet == pytest.approx(hop.single_pass / 3)
    assert hop.notes[0] == HOP_CAVEATS


def _numerical_transfer(coupling: float, alpha: float, span: float) -> float:
    """Population moved between two linearly crossing diabatic states, E_a - E_b = alpha t,
    constant coupling, t from -span to +span (atomic units, interaction picture)."""

    def rhs(t, y):
        ca, cb = y[0] + 1j * y[1], y[2] + 1j * y[3]
        phase = np.exp(0.5j * alpha * t * t)
        da = -1j * coupling * phase * cb
        db = -1j * coupling * np.conj(phase) * ca
        return [da.real, da.imag, db.real, db.imag]

    sol = solve_ivp(rhs, (-span, span), [1.0, 0.0, 0.0, 0.0], method="DOP853",
                    rtol=1e-10, atol=1e-12)
    return float(sol.y[2, -1] ** 2 + sol.y[3, -1] ** 2)


@pytest.mark.parametrize("coupling_eh", [0.002, 0.004])
def test_probability_matches_the_exact_two_state_dynamics(coupling_eh):
    """The Landau-Zener result is exact for linear diabatic crossings at constant velocity
    (Landau 1932, Zener 1932; common practice): integrate that model numerically."""
    mass_amu, kinetic = 1.0, 1e-3  # one particle moving along z
    speed = math.sqrt(2 * kinetic / (mass_amu * AMU_IN_ELECTRON_MASS))
    alpha = 1e-4  # (F_a - F_b) v in Eh per atomic time unit
    slope = alpha / speed
    ga, gb = np.array([[0, 0, slope / 2]]), np.array([[0, 0, -slope / 2]])
    hop = landau_zener_hop(coupling_eh * HARTREE_IN_WAVENUMBER, ga, gb, [mass_amu],
                           kinetic_energy_eh=kinetic)
    numeric = _numerical_transfer(coupling_eh, alpha, span=200 * coupling_eh / alpha)
    assert 0.05 < hop.single_pass < 0.99
    # finite-time oscillations of the numerical transfer are ~H/(alpha span) = 0.005 in
    # amplitude; measured differences 0.008 (0.002 Eh) and 0.005 (0.004 Eh). A factor of 2
    # in the exponent would move p by 0.1 or more.
    assert abs(numeric - hop.single_pass) < 0.02


def test_limits():
    ga, gb = _stretch(0.03)
    masses = [12.0, 16.0]
    weak = landau_zener_hop(1e-3, ga, gb, masses)
    weaker = landau_zener_hop(0.5e-3, ga, gb, masses)
    # weak coupling: p = gamma to first order, proportional to H_SO^2
    assert weak.single_pass == pytest.approx(weak.exponent, rel=1e-6)
    assert weak.single_pass / weaker.single_pass == pytest.approx(4.0, rel=1e-5)
    assert weak.double_pass == pytest.approx(2 * weak.single_pass, rel=1e-5)
    # no coupling, no hop; strong coupling, a certain hop and a note about it
    assert landau_zener_hop(0.0, ga, gb, masses).single_pass == 0.0
    strong = landau_zener_hop(3000.0, ga, gb, masses)
    assert strong.single_pass > 0.99 and strong.double_pass <= 1.0
    assert any("strong coupling" in n for n in strong.notes)
    # faster passage (higher temperature) and steeper crossings hop less: gamma ~ T^-1/2
    hot = landau_zener_hop(1e-3, ga, gb, masses, temperature_k=4 * 298.15)
    assert hot.exponent == pytest.approx(weak.exponent / 2, rel=1e-10)
    steep = landau_zener_hop(1e-3, *_stretch(0.06), masses)
    assert steep.exponent == pytest.approx(weak.exponent / 2, rel=1e-10)


def test_bad_input_is_refused():
    ga, gb = _stretch(0.03)
    with pytest.raises(InputError, match="surfaces touch"):
        landau_zener_hop(10.0, ga, ga, [12.0, 16.0])
    with pytest.raises(InputError, match="shape"):
        landau_zener_hop(10.0, ga, gb, [12.0])
    with pytest.raises(InputError, match="temperature"):
        landau_zener_hop(10.0, ga, gb, [12.0, 16.0], temperature_k=-5)
    with pytest.raises(InputError, match="coupling"):
        landau_zener_hop(float("nan"), ga, gb, [12.0, 16.0])


def test_hop_from_an_evaluation():
    geometry = Geometry(symbols=("C", "O"), coords_bohr=np.array([[0, 0, 0], [0, 0, 2.2]]))
    s1, t2 = parse_state("S1"), parse_state("T2")
    ga, gb = _stretch(0.03)
    evaluation = Evaluation(geometry=geometry, states=(StateInfo(s1, -112.0),
                                                       StateInfo(t2, -112.0)))
    couplings = SpinOrbitCouplings(operator="effective-charge", amplitudes="cis", pairs=(
        make_pair(s1, t2, np.array([0.0, 0.0, 40.0 / HARTREE_IN_WAVENUMBER])),))
    with pytest.raises(InputError, match="gradients of both"):
        hop_at_crossing(evaluation, couplings, "S1", "T2")
    with_grads = evaluation.with_gradients({s1: ga, t2: gb})
    hop = hop_at_crossing(with_grads, couplings, "S1", "T2")
    direct = landau_zener_hop(40.0, ga, gb, geometry.masses_amu)
    assert hop.coupling_cm == pytest.approx(40.0)
    assert hop.exponent == pytest.approx(direct.exponent, rel=1e-12)
