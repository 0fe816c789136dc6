"""Landau-Zener estimate of the spin-state hop at a singlet/triplet crossing point.

The weak-coupling Landau-Zener formula, as used for spin-forbidden reactions (Harvey, Phys.
Chem. Chem. Phys. 9 (2007) 331): passing once through the crossing seam, the system changes
spin state with probability

    p = 1 - exp(-gamma),    gamma = 2 pi H_SO^2 / (hbar v |dF|),

with H_SO the spin-orbit coupling between the two spin states, v the velocity through the seam
and |dF| the difference of the slopes of the two (spin-diabatic) surfaces along the hopping
direction. Here:

* the hopping direction is the gradient difference g_a - g_b in mass-weighted coordinates
  (the direction in which the two surfaces separate fastest); the slope difference is the
  norm of the mass-weighted gradient difference;
* the velocity along it comes from a kinetic energy of k_B T by default: the mean kinetic
  energy, along one coordinate, of the systems that cross a dividing surface (flux-weighted
  one-dimensional Maxwell-Boltzmann distribution; common practice);
* H_SO is the total coupling sqrt(sum_M |<S|H_SO|T, M>|^2): the singlet couples to one
  combination of the three triplet sublevels with that strength, the other two do not
  couple. A system arriving on the singlet surface hops with p; one arriving on the triplet
  surface with its sublevels equally populated hops with p / 3 on average;
* passing the seam twice (on the way up and back, without having hopped): 1 - exp(-2 gamma).

Caveats (also in :data:`HOP_CAVEATS`, to print wherever the numbers are shown): this is an
order-of-magnitude estimate. The real motion is neither one-dimensional nor at one velocity,
the surfaces are not linear over the coupling region, and H_SO is a first-order perturbative
coupling between spin-pure states; heavy elements need a relativistic treatment beyond this.
Rates need the full nonadiabatic transition-state expression, and results that matter need
checking with higher-level methods.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, Sequence

import numpy as np
from scipy import constants

from ..errors import InputError
from ..states import StateLabel
from ..units import AMU_IN_ELECTRON_MASS, HARTREE_IN_WAVENUMBER

__all__ = ["HopEstimate", "landau_zener_hop", "hop_at_crossing", "HOP_CAVEATS", "ROOM_TEMPERATURE_K",
           "STRONG_COUPLING_GAMMA"]

ROOM_TEMPERATURE_K = 298.15
#: Boltzmann constant in hartree per kelvin (scipy.constants)
BOLTZMANN_EH_PER_K: float = constants.k / constants.physical_constants["Hartree energy"][0]
#: atomic unit of velocity in m/s
AU_VELOCITY_M_S: float = constants.physical_constants["atomic unit of velocity"][0]
#: above this exponent the hop is likely and the spin-diabatic picture gives way
STRONG_COUPLING_GAMMA = 1.0
#: gradient differences below this (Eh/bohr) leave no direction to cross the seam along
MIN_SLOPE_DIFFERENCE = 1e-6

HOP_CAVEATS = (
    "Landau-Zener hop probabilities are order-of-magnitude estimates: one-dimensional "
    "passage at one thermal velocity through linear surfaces, with a first-order "
    "perturbative spin-orbit coupling between spin-pure states (heavy elements need a "
    "relativistic treatment beyond this). Check results that matter with higher-level "
    "methods.")


@dataclass(frozen=True)
class HopEstimate:
    """Landau-Zener hop estimate at one crossing point (see the module docstring).

    Attributes
    ----------
    coupling_cm
        Total spin-orbit coupling H_SO used, cm^-1.
    temperature_k, kinetic_energy_eh
        Temperature and the kinetic energy along the hopping direction (k_B T unless given).
    reduced_mass_amu
        Effective mass of the motion along the Cartesian gradient-difference direction.
    velocity_m_s
        Speed along that direction.
    slope_difference_eh_bohr
        |g_a - g_b| (Cartesian), Eh/bohr.
    exponent
        gamma = 2 pi H_SO^2 / (hbar v |dF|) (dimensionless).
    """

    coupling_cm: float
    temperature_k: float
    kinetic_energy_eh: float
    reduced_mass_amu: float
    velocity_m_s: float
    slope_difference_eh_bohr: float
    exponent: float
    notes: tuple[str, ...] = field(default=(HOP_CAVEATS,))

    @property
    def single_pass(self) -> float:
        """Probability of changing spin in one passage, arriving on the singlet."""
        return float(-math.expm1(-self.exponent))

    @property
    def double_pass(self) -> float:
        """Probability of having changed spin after passing the seam twice."""
        return float(-math.expm1(-2.0 * self.exponent))

    @property
    def single_pass_from_triplet(self) -> float:
        """One passage arriving on the triplet, sublevels equally populated: p / 3."""
        return self.single_pass / 3.0

    def to_dict(self) -> dict[str, Any]:
        return {
            "coupling_cm": self.coupling_cm, "temperature_k": self.temperature_k,
            "kinetic_energy_eh": self.kinetic_energy_eh,
            "reduced_mass_amu": self.reduced_mass_amu, "velocity_m_s": self.velocity_m_s,
            "slope_difference_eh_bohr": self.slope_difference_eh_bohr,
            "exponent": self.exponent, "single_pass": self.single_pass,
            "single_pass_from_triplet": self.single_pass_from_triplet,
            "double_pass": self.double_pass, "notes": list(self.notes),
        }


def landau_zener_hop(coupling_cm: float, gradient_a: np.ndarray, gradient_b: np.ndarray,
                     masses_amu: Sequence[float], *, temperature_k: float = ROOM_TEMPERATURE_K,
                     kinetic_energy_eh: float | None = None) -> HopEstimate:
    """Weak-coupling Landau-Zener hop estimate at a singlet/triplet crossing point.

    Parameters
    ----------
    coupling_cm
        Total spin-orbit coupling sqrt(sum_M |<S|H_SO|T, M>|^2) between the crossing states,
        cm^-1 (e.g. ``SpinOrbitCouplings.total_cm('S1', 'T2')``).
    gradient_a, gradient_b
        Gradients (natom, 3), Eh/bohr, of the two states at the crossing point.
    masses_amu
        Atomic masses (``Geometry.masses_amu``).
    temperature_k
        Temperature for the thermal velocity (default 298.15 K).
    kinetic_energy_eh
        Kinetic energy along the hopping direction instead of k_B T.

    This is an order-of-magnitude estimate: first-order perturbative SOC between spin-pure
    states, one-dimensional passage at one velocity, linear surfaces; heavy elements need a
    relativistic treatment beyond this. See the module docstring for the choices made.
    """
    ga, gb = (np.asarray(g, float) for g in (gradient_a, gradient_b))
    masses = np.asarray(masses_amu, float)
    if ga.shape != gb.shape or ga.ndim != 2 or ga.shape != (len(masses), 3):
        raise InputError("the two gradients must both have shape (natom, 3), one row per mass")
    if not math.isfinite(coupling_cm) or coupling_cm < 0:
        raise InputError(f"the spin-orbit coupling must be a finite value >= 0, got {coupling_cm}")
    if kinetic_energy_eh is None:
        if not temperature_k > 0:
            raise InputError(f"temperature must be > 0 K, got {temperature_k}")
        kinetic_energy_eh = BOLTZMANN_EH_PER_K * temperature_k
    elif not kinetic_energy_eh > 0:
        raise InputError(f"kinetic energy must be > 0, got {kinetic_energy_eh}")
    if np.any(masses <= 0):
        raise InputError("atomic masses must be positive")
    diff = ga - gb
    slope = float(np.linalg.norm(diff))
    if slope < MIN_SLOPE_DIFFERENCE:
        raise InputError(f"the two gradients are equal (|g_a - g_b| = {slope:.1e} Eh/bohr): the "
                         "surfaces touch without crossing here, and the Landau-Zener picture "
                         "does not apply")
    m_e = masses * AMU_IN_ELECTRON_MASS  # electron masses: atomic units throughout
    weighted = np.linalg.norm(diff / np.sqrt(m_e)[:, None])  # Eh / (bohr sqrt(m_e))
    velocity = math.sqrt(2.0 * kinetic_energy_eh)  # mass-weighted, bohr sqrt(m_e) / t_au
    h = coupling_cm / HARTREE_IN_WAVENUMBER
    exponent = 2.0 * math.pi * h * h / (velocity * weighted)
    reduced_mass = (slope / weighted) ** 2 / AMU_IN_ELECTRON_MASS
    speed = math.sqrt(2.0 * kinetic_energy_eh / (reduced_mass * AMU_IN_ELECTRON_MASS))
    notes = [HOP_CAVEATS]
    if exponent > STRONG_COUPLING_GAMMA:
        notes.append(f"strong coupling (Landau-Zener exponent {exponent:.2g} > "
                     f"{STRONG_COUPLING_GAMMA:g}): the hop is likely and the spin-diabatic "
                     "picture of the crossing gives way to an adiabatic one")
    return HopEstimate(coupling_cm=float(coupling_cm), temperature_k=float(temperature_k),
                       kinetic_energy_eh=float(kinetic_energy_eh),
                       reduced_mass_amu=float(reduced_mass),
                       velocity_m_s=float(speed * AU_VELOCITY_M_S),
                       slope_difference_eh_bohr=slope, exponent=float(exponent),
                       notes=tuple(notes))


def hop_at_crossing(evaluation: Any, couplings: Any, singlet: StateLabel | str,
                    triplet: StateLabel | str, *, temperature_k: float = ROOM_TEMPERATURE_K,
                    kinetic_energy_eh: float | None = None) -> HopEstimate:
    """:func:`landau_zener_hop` at a crossing point from an engine evaluation.

    ``evaluation`` must hold the gradients of ``singlet`` and ``triplet`` (adiabatic labels
    of that evaluation, e.g. from ``Engine.gradients``); ``couplings`` is the
    ``SpinOrbitCouplings`` at the same geometry.
    """
    total = couplings.total_cm(singlet, triplet)
    try:
        ga, gb = evaluation.gradient(singlet), evaluation.gradient(triplet)
    except KeyError as exc:
        raise InputError(f"{exc.args[0]}: the hop estimate needs the gradients of both "
                         "crossing states") from None
    return landau_zener_hop(total, ga, gb, evaluation.geometry.masses_amu,
                            temperature_k=temperature_k, kinetic_energy_eh=kinetic_energy_eh)
