"""Small test geometries (bohr) shared by the tests/test_coords_*.py files.

Sources of the structures (they only need to be realistic, the tests do not depend on the
exact numbers):
* water: r(OH) 0.9578 A, angle 104.4776 deg (Hoy and Bunker 1979, via NIST CCCBDB).
* formaldehyde: r(CO) 1.205 A, r(CH) 1.111 A, angle HCH 116.133 deg (Gurvich, via NIST CCCBDB).
* ethylene: r(CC) 1.339 A, r(CH) 1.086 A, angle HCH 117.6 deg (recalled from memory).
* HCN: r(CH) 1.066 A, r(CN) 1.153 A (recalled from memory), bent by 2 deg on purpose so the
  linear bends are exercised away from the exactly straight point.
* CO2: r(CO) 1.160 A (recalled from memory), exactly linear.
* water dimer: two copies of the water above, placed by hand in a roughly hydrogen-bonded
  arrangement (O...O about 2.9 A); an invented test arrangement, not a literature structure.
"""

from __future__ import annotations

import numpy as np

from surfcross.units import ANGSTROM_IN_BOHR


def _water_block(r_oh: float = 0.9578, angle_deg: float = 104.4776) -> np.ndarray:
    half = np.radians(angle_deg) / 2
    return np.array([[0.0, 0.0, 0.0], [0.0, r_oh * np.sin(half), r_oh * np.cos(half)],
                     [0.0, -r_oh * np.sin(half), r_oh * np.cos(half)]])


def water() -> tuple[tuple[str, ...], np.ndarray]:
    return ("O", "H", "H"), _water_block() * ANGSTROM_IN_BOHR


def formaldehyde() -> tuple[tuple[str, ...], np.ndarray]:
    half = np.radians(116.133) / 2
    xyz = np.array([[0.0, 0.0, 0.0], [0.0, 0.0, 1.205],
                    [0.0, 1.111 * np.sin(half), -1.111 * np.cos(half)],
                    [0.0, -1.111 * np.sin(half), -1.111 * np.cos(half)]])
    return ("C", "O", "H", "H"), xyz * ANGSTROM_IN_BOHR


def ethylene() -> tuple[tuple[str, ...], np.ndarray]:
    half = np.radians(117.6) / 2
    dy, dz = 1.086 * np.sin(half), 1.086 * np.cos(half)
    c = 1.339 / 2
    xyz = np.array([[0, 0, c], [0, 0, -c], [0, dy, c + dz], [0, -dy, c + dz],
                    [0, dy, -c - dz], [0, -dy, -c - dz]], float)
    return ("C", "C", "H", "H", "H", "H"), xyz * ANGSTROM_IN_BOHR


def hcn_bent(bend_deg: float = 2.0) -> tuple[tuple[str, ...], np.ndarray]:
    t = np.radians(bend_deg)
    xyz = np.array([[0.0, 1.066 * np.sin(t), -1.066 * np.cos(t)], [0.0, 0.0, 0.0], [0.0, 0.0, 1.153]])
    return ("H", "C", "N"), xyz * ANGSTROM_IN_BOHR


def co2() -> tuple[tuple[str, ...], np.ndarray]:
    xyz = np.array([[0.0, 0.0, -1.16], [0.0, 0.0, 0.0], [0.0, 0.0, 1.16]])
    return ("O", "C", "O"), xyz * ANGSTROM_IN_BOHR


def water_dimer() -> tuple[tuple[str, ...], np.ndarray]:
    donor = _water_block()
    # rotate the donor so that its H2 points along +x towards the acceptor oxygen
    h = donor[2] / np.linalg.norm(donor[2])
    axis = np.cross(h, [1.0, 0.0, 0.0])
    ang = np.arccos(np.clip(h[0], -1, 1))
    k = axis / np.linalg.norm(axis)
    kx = np.array([[0, -k[2], k[1]], [k[2], 0, -k[0]], [-k[1], k[0], 0]])
    rot = np.eye(3) + np.sin(ang) * kx + (1 - np.cos(ang)) * kx @ kx
    donor = donor @ rot.T
    acceptor = _water_block()
    acceptor = acceptor @ np.array([[0, 0, 1.0], [0, 1.0, 0], [-1.0, 0, 0]]).T  # Hs toward +x
    acceptor = acceptor + np.array([2.9, 0.1, 0.0])
    return ("O", "H", "H", "O", "H", "H"), np.vstack([donor, acceptor]) * ANGSTROM_IN_BOHR


ALL = {
    "water": water,
    "formaldehyde": formaldehyde,
    "ethylene": ethylene,
    "hcn": hcn_bent,
    "co2": co2,
    "water_dimer": water_dimer,
}


# --- checks that the builders reproduce the structures they cite --------------------------

def test_water_builder_matches_cited_structure():
    from scipy.spatial.distance import pdist

    from surfcross.units import BOHR_IN_ANGSTROM

    _, xyz = water()
    d_oh1, d_oh2, d_hh = pdist(xyz) * BOHR_IN_ANGSTROM
    # Hoy and Bunker 1979 via NIST CCCBDB: 0.9578 A, 104.4776 deg; H...H from the law of cosines
    assert np.isclose(d_oh1, 0.9578) and np.isclose(d_oh2, 0.9578)
    assert np.isclose(d_hh, 2 * 0.9578 * np.sin(np.radians(104.4776) / 2))


def test_formaldehyde_builder_matches_cited_structure():
    from scipy.spatial.distance import squareform, pdist

    from surfcross.units import BOHR_IN_ANGSTROM

    _, xyz = formaldehyde()
    dist = squareform(pdist(xyz)) * BOHR_IN_ANGSTROM
    # Gurvich via NIST CCCBDB: r(CO) 1.205 A, r(CH) 1.111 A, HCH 116.133 deg
    assert np.isclose(dist[0, 1], 1.205) and np.isclose(dist[0, 2], 1.111)
    assert np.isclose(dist[2, 3], 2 * 1.111 * np.sin(np.radians(116.133) / 2))
