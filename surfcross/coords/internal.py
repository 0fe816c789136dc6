"""Redundant internal coordinates with constraints (the ``internal`` coordinate system).

The optimizer works in the redundant set q of primitive internals (bonds, angles, linear
bends, dihedrals, out-of-plane angles; see :mod:`surfcross.coords.connectivity`). With the
Wilson matrix B = dq/dx (restricted to the atoms that may move) and G = B B^T:

* gradient      g_q = P' G^- B g_x
* Hessian       H_q = P' (G^- B H_x B^T G^-) P' + c (1 - P')
* projector     P = G G^- (the non-redundant part of q-space); with constrained primitives
                selected by S, P' = P - P S^T (S P S^T)^- S P removes them as well
                (Peng, Ayala, Schlegel and Frisch, J. Comput. Chem. 1996, 17, 49).

The Hessian transformation is first order: the term g_q . d2q/dx2 is left out, which is
exact at stationary points and a fair approximation near them. Directions outside P' get the
large curvature ``c`` = 1000 (Eh per unit^2) so a Newton or RFO step leaves them alone.

Constraints (:class:`~surfcross.coords.constraints.Constraint`): frozen atoms never move
(their B columns are dropped). Bonds, angles and dihedrals are held at their start value or
driven to a target; :meth:`RedundantInternals.project_step` moves them by at most 0.1 bohr or
5 degrees per step (``max_bond_step_bohr``, ``max_angle_step_deg``), and
:meth:`RedundantInternals.displace` enforces the requested values to 1e-8.

When no atom is frozen, rigid translations and rotations are projected out of the B rows
(see :func:`~surfcross.coords.backtransform.working_b_matrix`).

Limits: redundant internals suit covalent molecules. Weakly bound complexes are held by a
few long "fragment link" bonds whose model force constants are only rough guesses; nearly
straight units are described by lab-frame linear bends, and the set is rebuilt when an angle
passes 178 degrees. If the set misses an internal motion a warning says so
(:meth:`RedundantInternals.missing_motions`). For such systems, or when back-transformation
keeps failing, use Cartesian coordinates. The coordinate system only changes how steps are
taken, not what is found: the quality of a minimum or crossing is that of the electronic
structure method, which must be checked with higher-level methods.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass, replace

import numpy as np

from ..elements import covalent_radius_bohr, normalize_symbol
from ..errors import InputError
from .backtransform import (
    BackTransformOutcome,
    BackTransformSettings,
    back_transform,
    generalized_inverse,
    q_difference,
    rigid_motion_basis,
    working_b_matrix,
)
from .connectivity import DEFAULT_BOND_SCALE, LINEAR_ANGLE_DEG, build_primitives
from .constraints import Constraint
from .hessian import lindh_force_constants
from .primitives import Primitive, b_matrix, label, values, wrap_angle

__all__ = ["RedundantInternals"]

log = logging.getLogger(__name__)

_INERT_CURVATURE = 1000.0
_REBUILD_ANGLE_DEG = 178.0
_REBUILD_OOP_DEG = 70.0
_BOND_HYSTERESIS = 0.05


@dataclass(frozen=True)
class _Frame:
    """Linear algebra at one geometry: B (n, 3F) over free atoms, G^-, P and P' (n, n)."""

    bfree: np.ndarray
    ginv: np.ndarray
    proj: np.ndarray
    proj_c: np.ndarray


class RedundantInternals:
    """Redundant internal coordinates for one molecule, implementing ``CoordinateSystem``.

    Parameters
    ----------
    symbols
        Element symbols, one per atom.
    coords_bohr
        Geometry (natom, 3), bohr, used to choose the primitives and the held values.
    constraints
        Frozen atoms and held or driven bonds/angles/dihedrals.
    bond_scale
        Bond criterion r < bond_scale * (R_A + R_B), covalent radii (default 1.3).
    max_bond_step_bohr, max_angle_step_deg
        Largest change of a driven constraint per step.
    settings
        Back-transformation controls.
    """

    name = "internal"

    def __init__(
        self,
        symbols,
        coords_bohr: np.ndarray,
        constraints=(),
        *,
        bond_scale: float = DEFAULT_BOND_SCALE,
        max_bond_step_bohr: float = 0.1,
        max_angle_step_deg: float = 5.0,
        settings: BackTransformSettings = BackTransformSettings(),
    ) -> None:
        self.symbols = tuple(normalize_symbol(s) for s in symbols)
        xyz = np.asarray(coords_bohr, float)
        if xyz.shape != (len(self.symbols), 3):
            raise InputError(f"coordinates of shape {xyz.shape} for {len(self.symbols)} atoms, "
                             f"expected ({len(self.symbols)}, 3)")
        if len(self.symbols) < 2:
            raise InputError("internal coordinates need at least two atoms")
        self.bond_scale = float(bond_scale)
        self.max_bond_step_bohr = float(max_bond_step_bohr)
        self.max_angle_step_deg = float(max_angle_step_deg)
        self.settings = settings
        prims, self._bonds = build_primitives(self.symbols, xyz, self.bond_scale)
        self._free = np.ones(len(self.symbols), bool)
        self.constraints, index, target = self._resolve(tuple(constraints), prims, xyz)
        self.primitives: tuple[Primitive, ...] = tuple(prims)
        self._constrained = tuple(index)
        self._targets = np.asarray(target, float)
        missing = self.missing_motions(xyz)
        if missing:
            log.warning("the internal coordinates miss %d internal motion(s) of this molecule "
                        "(e.g. a torsion about a linear chain); use Cartesian coordinates", missing)

    # --- constraints ---------------------------------------------------------------------

    def _resolve(self, constraints, prims: list[Primitive], xyz: np.ndarray):
        """Freeze atoms; find/add constrained primitives; fix every target (start value if None)."""
        resolved, index, target = [], [], []
        for con in constraints:
            if not isinstance(con, Constraint):
                raise InputError(f"expected a Constraint, got {con!r}")
            con.check(len(self.symbols))
            if con.kind == "atom":
                self._free[con.atoms[0]] = False
                resolved.append(con)
                continue
            p = _matching_primitive(con, prims)
            now = float(values([p], xyz)[0])
            _check_well_defined(con, p, xyz)
            goal = now if con.target is None else _internal_units(con)
            if prims.index(p) in index:
                raise InputError(f"two constraints on the same {con.kind} (atoms "
                                 f"{[a + 1 for a in con.atoms]}); give each coordinate once")
            index.append(prims.index(p))
            target.append(goal)
            resolved.append(replace(con, target=_user_units(con.kind, goal)))
        return tuple(resolved), index, target

    def _constraint_moves(self, xyz: np.ndarray) -> np.ndarray:
        """Per-step change of every constrained primitive toward its target, clipped."""
        sub = [self.primitives[i] for i in self._constrained]
        delta = q_difference(sub, self._targets, values(sub, xyz))
        limits = np.array([self.max_bond_step_bohr if p.kind == "bond" else np.radians(self.max_angle_step_deg)
                           for p in sub])
        return np.clip(delta, -limits, limits)

    # --- linear algebra ------------------------------------------------------------------

    def _frame(self, xyz: np.ndarray) -> _Frame:
        bfree = working_b_matrix(self.primitives, xyz, self._free)
        ginv, proj = generalized_inverse(bfree @ bfree.T, self.settings.singular_rel_tol)
        proj_c = proj
        if self._constrained:
            idx = list(self._constrained)
            block = np.linalg.pinv(proj[np.ix_(idx, idx)], rcond=1e-10, hermitian=True)
            proj_c = proj - proj[:, idx] @ block @ proj[idx, :]
        return _Frame(bfree=bfree, ginv=ginv, proj=proj, proj_c=proj_c)

    def _pad(self, frame: _Frame, hq: np.ndarray) -> np.ndarray:
        pc = frame.proj_c
        inert = np.eye(len(pc)) - pc
        return pc @ hq @ pc + _INERT_CURVATURE * inert

    # --- CoordinateSystem protocol -------------------------------------------------------

    def values(self, coords_bohr: np.ndarray) -> np.ndarray:
        """Primitive values q, (n,): bohr for bonds, radian otherwise; dihedrals in (-pi, pi]."""
        return values(self.primitives, np.asarray(coords_bohr, float).reshape(-1, 3))

    def b_matrix(self, coords_bohr: np.ndarray) -> np.ndarray:
        """Wilson B matrix dq/dx over all atoms, (n, 3N)."""
        return b_matrix(self.primitives, np.asarray(coords_bohr, float).reshape(-1, 3))

    def gradient(self, coords_bohr: np.ndarray, gradient_cart: np.ndarray) -> np.ndarray:
        """dE/dq (n,) from dE/dx (natom, 3): Eh/bohr for bonds, Eh/rad otherwise.

        Constrained and redundant parts are removed; frozen atoms' forces play no role.
        """
        frame = self._frame(coords_bohr)
        gfree = np.asarray(gradient_cart, float).reshape(-1)[np.repeat(self._free, 3)]
        return frame.proj_c @ (frame.ginv @ (frame.bfree @ gfree))

    def hessian(self, coords_bohr: np.ndarray, hessian_cart: np.ndarray) -> np.ndarray:
        """Cartesian Hessian (3N, 3N) carried into q-space (n, n), first order (see module doc)."""
        frame = self._frame(coords_bohr)
        cols = np.repeat(self._free, 3)
        hfree = np.asarray(hessian_cart, float)[np.ix_(cols, cols)]
        left = frame.ginv @ frame.bfree
        return self._pad(frame, left @ hfree @ left.T)

    def initial_hessian(self, symbols, coords_bohr: np.ndarray) -> np.ndarray:
        """Diagonal Lindh (1995) model in q-space, projected like :meth:`hessian`, (n, n).

        ``symbols`` may be None to use those given at construction.
        """
        xyz = np.asarray(coords_bohr, float).reshape(-1, 3)
        symbols = self.symbols if symbols is None else tuple(normalize_symbol(s) for s in symbols)
        consts = lindh_force_constants(symbols, xyz, self.primitives)
        return self._pad(self._frame(xyz), np.diag(consts))

    def project_step(self, coords_bohr: np.ndarray, dq: np.ndarray) -> np.ndarray:
        """Remove redundant and constrained parts of dq; add the (clipped) constraint moves.

        The constraint moves are realised by the smallest step in the non-redundant space
        that changes each constrained primitive by exactly its move.
        """
        frame = self._frame(coords_bohr)
        step = frame.proj_c @ np.asarray(dq, float)
        if not self._constrained:
            return step
        idx = list(self._constrained)
        moves = self._constraint_moves(np.asarray(coords_bohr, float).reshape(-1, 3))
        block = np.linalg.pinv(frame.proj[np.ix_(idx, idx)], rcond=1e-10, hermitian=True)
        return step + frame.proj[:, idx] @ (block @ moves)

    def displace(self, coords_bohr: np.ndarray, dq: np.ndarray) -> np.ndarray:
        """New Cartesians (natom, 3), bohr, after the step dq (see :meth:`displace_with_report`)."""
        return self.displace_with_report(coords_bohr, dq).coords_bohr

    def displace_with_report(self, coords_bohr: np.ndarray, dq: np.ndarray) -> BackTransformOutcome:
        """Back-transform q(x) + dq; frozen atoms fixed, constrained primitives exact.

        Raises :class:`~surfcross.errors.BackTransformError` when no usable geometry is found.
        """
        xyz = np.asarray(coords_bohr, float).reshape(-1, 3)
        target = self.values(xyz) + np.asarray(dq, float)
        return back_transform(self.primitives, xyz, target, free_atoms=self._free,
                              constrained=self._constrained, settings=self.settings)

    def needs_rebuild(self, coords_bohr: np.ndarray) -> bool:
        """True when a bond formed or broke, or an angle/dihedral/out-of-plane became ill-defined."""
        reason = self.rebuild_reason(coords_bohr)
        if reason:
            log.info("internal coordinates need rebuilding: %s", reason)
        return bool(reason)

    # --- extras ----------------------------------------------------------------------------

    def rebuild_reason(self, coords_bohr: np.ndarray) -> str:
        """Why the coordinate set no longer suits this geometry ('' when it still does)."""
        xyz = np.asarray(coords_bohr, float).reshape(-1, 3)
        changed = self._bond_changes(xyz)
        if changed:
            return changed
        for p in self.primitives:
            if p.kind == "angle" and np.degrees(values([p], xyz)[0]) > _REBUILD_ANGLE_DEG:
                return f"{label(p, self.symbols)} is nearly straight"
            if p.kind == "dihedral" and _dihedral_straight(p, xyz):
                return f"{label(p, self.symbols)} is undefined (three atoms in line)"
            if p.kind == "out_of_plane" and abs(np.degrees(values([p], xyz)[0])) > _REBUILD_OOP_DEG:
                return f"{label(p, self.symbols)} is too large"
        return ""

    def _bond_changes(self, xyz: np.ndarray) -> str:
        """Name a bond formed (r < 0.95 * criterion) or broken (r > 1.05 * criterion)."""
        radii = np.array([covalent_radius_bohr(s) for s in self.symbols])
        n = len(self.symbols)
        for i in range(n):
            for j in range(i + 1, n):
                limit = self.bond_scale * (radii[i] + radii[j])
                dist = float(np.linalg.norm(xyz[i] - xyz[j]))
                pair = f"{self.symbols[i]}{i + 1}-{self.symbols[j]}{j + 1}"
                if (i, j) in self._bonds and dist > (1 + _BOND_HYSTERESIS) * limit:
                    return f"bond {pair} broke ({dist:.2f} bohr)"
                if (i, j) not in self._bonds and dist < (1 - _BOND_HYSTERESIS) * limit:
                    return f"bond {pair} formed ({dist:.2f} bohr)"
        return ""

    def rebuilt(self, coords_bohr: np.ndarray) -> "RedundantInternals":
        """A new coordinate set for this geometry with the same constraints and settings.

        Held constraints keep the value they had when first built, not the current one.
        """
        return RedundantInternals(self.symbols, coords_bohr, self.constraints, bond_scale=self.bond_scale,
                                  max_bond_step_bohr=self.max_bond_step_bohr,
                                  max_angle_step_deg=self.max_angle_step_deg, settings=self.settings)

    def difference(self, q_new: np.ndarray, q_old: np.ndarray) -> np.ndarray:
        """q_new - q_old with dihedral differences wrapped into (-pi, pi]."""
        return q_difference(self.primitives, q_new, q_old)

    def labels(self) -> list[str]:
        """Readable names of the primitives (1-based atom numbers)."""
        return [label(p, self.symbols) for p in self.primitives]

    @property
    def frozen_atoms(self) -> tuple[int, ...]:
        """0-based indices of frozen atoms."""
        return tuple(int(i) for i in np.flatnonzero(~self._free))

    def constraint_errors(self, coords_bohr: np.ndarray) -> np.ndarray:
        """Wrapped (current - target) of every constrained primitive, bohr or radian."""
        sub = [self.primitives[i] for i in self._constrained]
        return q_difference(sub, values(sub, np.asarray(coords_bohr, float).reshape(-1, 3)), self._targets)

    def missing_motions(self, coords_bohr: np.ndarray) -> int:
        """Internal motions (3N-6, or 3N-5 if linear) that the primitive set does not span."""
        xyz = np.asarray(coords_bohr, float).reshape(-1, 3)
        expected = xyz.size - rigid_motion_basis(xyz).shape[1]
        bmat = working_b_matrix(self.primitives, xyz, np.ones(len(xyz), bool))
        evals = np.linalg.eigvalsh(bmat @ bmat.T)
        rank = int(np.sum(evals > self.settings.singular_rel_tol * max(evals[-1], 1e-300)))
        return max(0, expected - rank)


def _matching_primitive(con: Constraint, prims: list[Primitive]) -> Primitive:
    """The primitive of the constraint (either atom order); appended to prims if absent."""
    for p in prims:
        if p.kind == con.kind and p.atoms in (con.atoms, con.atoms[::-1]):
            return p
    new = Primitive(con.kind, con.atoms)
    prims.append(new)
    return new


def _internal_units(con: Constraint) -> float:
    if con.kind == "bond":
        if con.target <= 0:
            raise InputError(f"bond target {con.target} bohr must be positive")
        return float(con.target)
    if con.kind == "angle":
        if not 180.0 - LINEAR_ANGLE_DEG < con.target < LINEAR_ANGLE_DEG:
            raise InputError(f"angle target {con.target} deg must lie between 5 and 175 degrees")
        return float(np.radians(con.target))
    return float(wrap_angle(np.radians(con.target)))


def _user_units(kind: str, goal: float) -> float:
    return goal if kind == "bond" else float(np.degrees(goal))


def _check_well_defined(con: Constraint, p: Primitive, xyz: np.ndarray) -> None:
    if con.kind == "angle" and np.degrees(values([p], xyz)[0]) >= LINEAR_ANGLE_DEG:
        raise InputError(f"angle constraint on atoms {[a + 1 for a in con.atoms]}: the angle is nearly "
                         "180 degrees, where it is not a usable coordinate")
    if con.kind == "dihedral" and _dihedral_straight(p, xyz, LINEAR_ANGLE_DEG):
        raise InputError(f"dihedral constraint on atoms {[a + 1 for a in con.atoms]}: three of its atoms "
                         "are (nearly) in line, so the dihedral is undefined")


def _dihedral_straight(p: Primitive, xyz: np.ndarray, limit_deg: float = _REBUILD_ANGLE_DEG) -> bool:
    a, b, c, d = p.atoms
    angles = values([Primitive("angle", (a, b, c)), Primitive("angle", (b, c, d))], xyz)
    return bool(np.degrees(angles.max()) > limit_deg or np.degrees(angles.min()) < 180.0 - limit_deg)
