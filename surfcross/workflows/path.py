"""An interpolated pathway through given geometries, with every state computed along it.

Typical use: start geometry -> excited-state minimum -> crossing point, to see whether the
funnel is reachable downhill. The pathway is *not* a minimum-energy path: the points are
interpolated, not optimized, so barriers along it are upper bounds to the true ones.

Steps:

1. Each geometry is rigidly aligned onto the previous one (Kabsch; mass-weighted when the
   path length is mass-weighted), so no rotation or translation enters the path.
2. Each segment is interpolated with ``images`` points between its ends: by default linearly
   in redundant internal coordinates (the primitive set of the segment's start; each point is
   back-transformed from the previous one and aligned onto the straight Cartesian line), or
   linearly in Cartesians (``interpolation='cartesian'``). A segment falls back to Cartesians,
   with a warning, when its internal coordinates miss a motion or fail to reproduce the
   segment's end geometry.
3. All states are computed at every point. Curves are given twice: *adiabatic* (by energy
   order at each point) and *connected* (each state followed by wavefunction overlap between
   neighbouring points, so a curve keeps its character through crossings and keeps the
   label it had at the first point).
4. x = cumulative path length in angstrom (or amu^1/2 angstrom when mass-weighted); energies
   in eV relative to the reference state (S0) at the first point.
"""

from __future__ import annotations

import logging
from typing import Any, Sequence

import numpy as np

from ..coords.internal import RedundantInternals
from ..engine.base import Evaluation, MethodSpec
from ..errors import BackTransformError, InputError
from ..geometry import Geometry, kabsch_align, rmsd, write_xyz
from ..io.plots import plot_profile
from ..io.results import complete_result
from ..states import parse_states
from ..tasks import TaskResult, prepare_method
from ..tasks.build import build_engine
from ..tasks.common import method_warnings
from ..units import BOHR_IN_ANGSTROM, HARTREE_IN_EV
from .shared import connect_roots, merge_warnings

__all__ = ["pathway", "align_chain", "interpolate_segment", "path_length", "INTERPOLATIONS",
           "PATH_NOTE"]

log = logging.getLogger(__name__)

INTERPOLATIONS = ("internal", "cartesian")
#: a back-transformed segment end farther than this from the given end (angstrom, RMSD after
#: alignment) makes the segment fall back to Cartesian interpolation
END_TOLERANCE_ANGSTROM = 1e-3

PATH_NOTE = (
    "The points of this pathway are interpolated, not optimized: energies along it are upper "
    "bounds to a minimum-energy path, and a barrier seen here may vanish on relaxation. Curves "
    "labelled 'connected' follow each state's character by wavefunction overlap; curves "
    "labelled 'adiabatic' follow energy order. Near crossings with the ground state, linear "
    "response (CIS/TDA/TDDFT) gives the wrong shape of the intersection; check with a "
    "multireference method before drawing conclusions."
)


def align_chain(geometries: Sequence[Geometry], *, mass_weighted: bool = False) -> list[Geometry]:
    """Each geometry rigidly aligned onto the previous (aligned) one; the first is kept."""
    first = geometries[0]
    for k, g in enumerate(geometries[1:], start=2):
        if tuple(g.symbols) != tuple(first.symbols):
            raise InputError(f"geometry {k} has atoms {' '.join(g.symbols)}, the first has "
                             f"{' '.join(first.symbols)}: a pathway needs the same atoms in the "
                             "same order everywhere")
        if (g.charge, g.spin) != (first.charge, first.spin):
            raise InputError(f"geometry {k} has another charge or spin than the first")
    weights = first.masses_amu if mass_weighted else None
    out = [first]
    for g in geometries[1:]:
        aligned, _ = kabsch_align(g.coords_bohr, out[-1].coords_bohr, weights)
        out.append(g.with_coords(aligned))
    return out


def _cartesian_segment(a: np.ndarray, b: np.ndarray, images: int) -> list[np.ndarray]:
    return [(1.0 - t) * a + t * b for t in np.linspace(0.0, 1.0, images + 2)]


def _internal_segment(symbols: Sequence[str], a: np.ndarray, b: np.ndarray,
                      images: int) -> list[np.ndarray]:
    """Linear interpolation of the redundant internals of ``a``; raises BackTransformError
    or InputError when it cannot represent the segment."""
    coords = RedundantInternals(symbols, a)
    for where, xyz in (("end", b), ("middle", 0.5 * (a + b))):
        if coords.missing_motions(xyz):
            raise InputError(f"the internal coordinates miss a motion at the segment's {where}")
    qa = coords.values(a)
    dq = coords.difference(coords.values(b), qa)
    points, prev = [a], a
    for t in np.linspace(0.0, 1.0, images + 2)[1:]:
        target = qa + t * dq
        outcome = coords.displace_with_report(prev, coords.difference(target, coords.values(prev)))
        if not outcome.converged:
            raise BackTransformError(f"back-transformation did not converge at t = {t:.2f}")
        prev = outcome.coords_bohr
        line = (1.0 - t) * a + t * b
        points.append(kabsch_align(prev, line)[0])
    miss = rmsd(points[-1], b) * BOHR_IN_ANGSTROM
    if miss > END_TOLERANCE_ANGSTROM:
        raise BackTransformError(f"the interpolated end misses the given geometry by "
                                 f"{miss:.3f} angstrom (RMSD)")
    points[-1] = b
    return points


def interpolate_segment(symbols: Sequence[str], a: np.ndarray, b: np.ndarray, images: int, *,
                        interpolation: str = "internal") -> tuple[list[np.ndarray], str, str]:
    """Points from ``a`` to ``b`` (both included, bohr), ``images`` of them in between.

    Returns the points, the interpolation actually used and a note ('' when none).
    """
    if interpolation not in INTERPOLATIONS:
        raise InputError(f"unknown interpolation {interpolation!r}: choose "
                         f"{', '.join(INTERPOLATIONS)}")
    if images < 0:
        raise InputError(f"the number of points between geometries must be >= 0, got {images}")
    if interpolation == "internal" and len(symbols) >= 3:
        try:
            return _internal_segment(symbols, a, b, images), "internal", ""
        except (BackTransformError, InputError) as exc:
            note = f"internal-coordinate interpolation failed ({exc}); used Cartesians instead"
            log.warning("%s", note)
            return _cartesian_segment(a, b, images), "cartesian", note
    return _cartesian_segment(a, b, images), "cartesian", ""


def path_length(points: Sequence[np.ndarray], masses_amu: np.ndarray | None = None) -> np.ndarray:
    """Cumulative length along the points, angstrom (amu^1/2 angstrom with masses)."""
    x = [0.0]
    w = np.ones(len(points[0])) if masses_amu is None else np.asarray(masses_amu, float)
    for p, q in zip(points[:-1], points[1:]):
        d = (np.asarray(q) - np.asarray(p)) * BOHR_IN_ANGSTROM
        x.append(x[-1] + float(np.sqrt(np.sum(w[:, None] * d**2))))
    return np.array(x)


def _build_points(geometries: Sequence[Geometry], images: int, interpolation: str,
                  mass_weighted: bool) -> tuple[list[np.ndarray], list[int], list[str], list[str]]:
    chain = align_chain(geometries, mass_weighted=mass_weighted)
    symbols = chain[0].symbols
    points: list[np.ndarray] = [chain[0].coords_bohr]
    given, used, notes = [0], [], []
    for k, (a, b) in enumerate(zip(chain[:-1], chain[1:]), start=1):
        seg, kind, note = interpolate_segment(symbols, a.coords_bohr, b.coords_bohr, images,
                                              interpolation=interpolation)
        points += seg[1:]
        given.append(len(points) - 1)
        used.append(kind)
        if note:
            notes.append(f"segment {k}: {note}")
    return points, given, used, notes


def _curves(evaluations: Sequence[Evaluation], roots: dict[str, list[str]],
            base: float) -> tuple[dict[str, list[float]], dict[str, list[float]]]:
    labels = [str(s.label) for s in evaluations[0].states]
    adiabatic = {lab: [] for lab in labels}
    for ev in evaluations:
        energies = ev.energies()
        for lab in labels:
            e = energies.get(lab)
            adiabatic[lab].append(None if e is None else (e - base) * HARTREE_IN_EV)
    connected = {name: [(ev.energy(r) - base) * HARTREE_IN_EV for ev, r in zip(evaluations, rs)]
                 for name, rs in roots.items()}
    return adiabatic, connected


def _profile(evaluations: Sequence[Evaluation], roots: dict[str, list[str]], x: np.ndarray, *,
             mass_weighted: bool, given: list[int], used: list[str], images: int) -> dict[str, Any]:
    """The 'profile' entry of result.json (x, curves, roots, energies per point)."""
    ref = next(s for s in evaluations[0].states if s.label.is_reference)
    adiabatic, connected = _curves(evaluations, roots, ref.energy_eh)
    return {
        "x": x.tolist(), "x_unit": "amu^1/2 angstrom" if mass_weighted else "angstrom",
        "path_length": "mass-weighted" if mass_weighted else "plain",
        "given_points": given, "interpolation": used, "images": images,
        "reference": f"{ref.label} at the first point", "reference_eh": ref.energy_eh,
        "adiabatic_ev": adiabatic, "connected_ev": connected, "connected_roots": roots,
        "energies_eh": [ev.energies() for ev in evaluations],
        "oscillator_strengths": [{str(s.label): s.oscillator_strength for s in ev.states}
                                 for ev in evaluations],
    }


def _write_trajectory(run_dir: Any, evaluations: Sequence[Evaluation], x: np.ndarray,
                      roots: dict[str, list[str]]) -> None:
    """One frame per point; energies of the connected states under their first-point names."""
    comments = [" ".join([f"step={i}", f"x={x[i]:.6f}"]
                         + [f"E_{k}={ev.energy(rs[i]):.10f}" for k, rs in roots.items()])
                for i, ev in enumerate(evaluations)]
    write_xyz(run_dir.trajectory_xyz, [ev.geometry for ev in evaluations], comments)


def pathway(geometries: Sequence[Geometry], method: MethodSpec, *, images: int = 6,
            interpolation: str = "internal", mass_weighted: bool = False,
            show: Sequence[str] = (), run_dir: Any = None, engine: Any = None) -> TaskResult:
    """All states along an interpolated pathway through ``geometries`` (two or more).

    Parameters
    ----------
    geometries
        The geometries to pass through, in order (same atoms, same order, same charge/spin).
    method
        Electronic-structure method; with ``show`` the roots are raised to cover those states.
    images
        Points between consecutive geometries (0: only the given geometries).
    interpolation
        'internal' (redundant internal coordinates, default) or 'cartesian'.
    mass_weighted
        Path length (and alignment) mass-weighted, in amu^1/2 angstrom.
    show
        States drawn in the profile plot (default all); result.json always holds all.
    run_dir
        A RunDirectory: result.json, trajectory.xyz (every point), final.xyz, report.md,
        profile.png (connected curves) and profile_adiabatic.png.

    Returns
    -------
    TaskResult
        ``data['profile']`` holds x, the adiabatic and connected curves and the roots.
    """
    if len(geometries) < 2:
        raise InputError("a pathway needs at least two geometries")
    labels = parse_states(list(show)) if show else ()
    spec = prepare_method(method, labels, geometries[0])
    points, given, used, notes = _build_points(geometries, images, interpolation, mass_weighted)
    first = geometries[0]
    own = engine is None
    engine = engine or build_engine(spec, run_dir)
    try:
        evaluations = []
        for i, xyz in enumerate(points):
            log.info("pathway point %d of %d", i + 1, len(points))
            evaluations.append(engine.states(first.with_coords(xyz)))
        roots, link_notes = connect_roots(engine, evaluations)
    finally:
        if own:
            engine.close()
    x = path_length(points, first.masses_amu if mass_weighted else None)
    profile = _profile(evaluations, roots, x, mass_weighted=mass_weighted, given=given,
                       used=used, images=images)
    swaps = [name for name, rs in roots.items() if any(r != name for r in rs)]
    warnings = merge_warnings(method_warnings(spec, labels), notes, link_notes,
                              *(ev.warnings for ev in evaluations))
    last = evaluations[-1]
    out = {"task": "path", "converged": True, "status": "finished", "message": "",
           "iterations": 0, "evaluations": len(evaluations),
           "states": [str(s.label) for s in evaluations[0].states],
           "energies_eh": {k: last.energy(rs[-1]) for k, rs in roots.items()},
           "adiabatic_energies_eh": last.energies(),
           "followed_roots": {k: rs[-1] for k, rs in roots.items()}, "gap_ev": None,
           "method": {**spec.to_dict(), "charge": first.charge, "spin": first.spin},
           "search": None, "warnings": warnings, "profile": profile,
           "character_changes": swaps}
    if run_dir is not None:
        out = _record(run_dir, out, evaluations, x, profile, show, swaps)
    else:
        out = complete_result(out)
    return TaskResult(task="path", converged=True, status="finished", message="",
                      geometry=last.geometry, evaluation=last, states=tuple(out["states"]),
                      method=spec, evaluations=len(evaluations), warnings=tuple(warnings),
                      data=out, run_dir=None if run_dir is None else run_dir.path)


def _record(run_dir: Any, out: dict[str, Any], evaluations: Sequence[Evaluation], x: np.ndarray,
            profile: dict[str, Any], show: Sequence[str], swaps: Sequence[str]) -> dict[str, Any]:
    _write_trajectory(run_dir, evaluations, x, profile["connected_roots"])
    keep = [str(s) for s in parse_states(list(show))] if show else list(profile["connected_ev"])
    xlabel = f"path length / {profile['x_unit']}"
    adiabatic_png = plot_profile(run_dir.path / "profile_adiabatic.png", x,
                                 {k: v for k, v in profile["adiabatic_ev"].items() if k in keep},
                                 xlabel=xlabel, title="adiabatic curves (energy order)")
    given = ", ".join(f"{x[i]:.3f}" for i in profile["given_points"])
    text = [PATH_NOTE, "", f"Given geometries at x = {given} ({profile['x_unit']}); "
            f"{profile['images']} interpolated points between each pair "
            f"({', '.join(profile['interpolation'])}).",
            "", "States whose character passes to another adiabatic root along the path: "
            + (", ".join(swaps) if swaps else "none") + ".",
            "", "`profile.png`: connected curves (character kept); "
            + ("`profile_adiabatic.png`: adiabatic curves." if adiabatic_png else
               "no plots (matplotlib missing).")]
    return run_dir.finish(out, evaluations[-1].geometry, sections=[("Pathway", "\n".join(text))],
                          profile={"x": x.tolist(), "xlabel": xlabel,
                                   "curves_ev": {k: v for k, v in profile["connected_ev"].items()
                                                 if k in keep}})

