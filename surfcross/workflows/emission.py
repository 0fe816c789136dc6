"""Absorption, excited-state relaxation, emission and Stokes shift of one molecule.

Stages (each a sub-run folder of the workflow's run directory):

1. ``start``: all states at the start geometry, plus the ground-state gradient there. If its
   largest component exceeds the largest-force threshold of the chosen convergence preset,
   the start is not a ground-state minimum and the ground state is relaxed (stage 2) even
   when not asked for.
2. ``ground`` (when asked or needed): minimum of the reference state (S0, or 0 for open
   shells). Its geometry is the Franck-Condon point; otherwise the start geometry is.
3. ``excited``: minimum of the chosen excited state, started from the *start* geometry (so a
   deliberate symmetry-breaking distortion of the input is kept) and followed by overlap.

Then: absorption = vertical gap of the absorbing root at the Franck-Condon point (the root
carrying the chosen state's character there, found by overlap with the start); emission =
vertical gap of the emitting root (the root carrying the followed state at the excited
minimum) above the reference state at that geometry; adiabatic energy = excited minimum minus
ground minimum; Stokes shift = absorption - emission; optionally the zero-point corrected
0-0 energy from the harmonic frequencies of both minima (6N gradients each).

What the numbers are: gas-phase electronic energy differences of one molecule, without
vibronic band shapes or any solvent. A vertical gap approximates a band maximum, not the
0-0 line; the zero-point corrected adiabatic energy approximates the 0-0 line. Everything
carries the errors of the chosen method (CIS/TDA/TDDFT) and needs checking with
higher-level methods.
"""

from __future__ import annotations

import logging
from typing import Any, Mapping

import numpy as np

from ..analysis.curvature import check_curvature
from ..analysis.vertical import vertical_rows
from ..engine.base import Evaluation, MethodSpec
from ..errors import InputError
from ..geometry import Geometry
from ..io.results import complete_result
from ..optimize import ConvergenceSettings
from ..states import StateLabel, parse_state
from ..tasks import RunOptions, TaskResult, compute_states, prepare_method, relax
from ..tasks.build import build_engine
from ..tasks.common import check_labels, method_warnings
from ..units import HARTREE_IN_EV, ev_to_nm, ev_to_wavenumber
from .shared import LOW_OVERLAP, carrier_root, merge_warnings, stage_summary

__all__ = ["emission", "start_is_minimum", "SPECTRA_NOTE"]

log = logging.getLogger(__name__)

SPECTRA_NOTE = (
    "All numbers are electronic energy differences of one isolated molecule (gas phase, no "
    "solvent, no environment) at the level of the chosen method. Absorption and emission are "
    "vertical gaps: they approximate the maxima of the measured bands (Franck-Condon "
    "principle), not their 0-0 lines, and no vibronic band shape is computed. The adiabatic "
    "energy (minimum to minimum) plus the zero-point correction approximates the 0-0 line "
    "seen in jet-cooled gas-phase spectra. The Stokes shift here is the difference of the two "
    "vertical gaps; shifts measured in solution also contain solvent relaxation. Check any "
    "number you rely on with a higher-level method and against experiment."
)


def _threshold(options: RunOptions) -> tuple[str, float]:
    conv = ConvergenceSettings.preset(options.convergence)
    if options.convergence_overrides:
        conv = conv.with_overrides(**options.convergence_overrides)
    if conv.max_force is not None:
        return "largest", float(conv.max_force)
    return "rms", float(conv.rms_force)


def start_is_minimum(gradient: np.ndarray, options: RunOptions) -> tuple[bool, str]:
    """Whether a Cartesian ground-state gradient passes the force threshold of ``options``.

    Returns the decision and a sentence saying how it was made.
    """
    kind, limit = _threshold(options)
    g = np.asarray(gradient, float)
    value = float(np.abs(g).max()) if kind == "largest" else float(np.sqrt(np.mean(g**2)))
    ok = value <= limit
    verdict = "a ground-state minimum" if ok else "not a ground-state minimum"
    return ok, (f"the start geometry is {verdict}: {kind} ground-state gradient component "
                f"{value:.2e} Eh/bohr {'<=' if ok else '>'} threshold {limit:.2e} "
                f"('{options.convergence}' preset)")


def _reference(evaluation: Evaluation) -> StateLabel:
    for s in evaluation.states:
        if s.label.is_reference:
            return s.label
    raise InputError("the reference (ground) state was not computed")


def _band(evaluation: Evaluation, root: StateLabel) -> dict[str, Any]:
    gap = evaluation.excitation_ev(root)
    return {"root": str(root), "ev": gap, "nm": ev_to_nm(gap) if gap > 0 else None,
            "oscillator_strength": evaluation.state(root).oscillator_strength}


def _zero_point(engine: Any, stage: TaskResult | None, geometry: Geometry,
                root: StateLabel) -> tuple[dict[str, Any], int]:
    """Curvature data at a minimum: reused from the stage when it ran a check, else computed."""
    if stage is not None and isinstance(stage.data.get("curvature"), Mapping):
        return dict(stage.data["curvature"]), 0
    result = check_curvature(engine, geometry, root)
    return result.to_dict(), result.evaluations


def emission(geometry: Geometry, method: MethodSpec, *, state: str | StateLabel = "S1",
             options: RunOptions = RunOptions(), relax_ground: bool = False,
             zero_point: bool = False, run_dir: Any = None, progress: bool = True,
             engine: Any = None) -> TaskResult:
    """Absorption, excited-state minimum, emission, adiabatic energy and Stokes shift.

    Parameters
    ----------
    geometry
        Start geometry; the chosen state is named by its adiabatic order here.
    method
        Electronic-structure method (roots raised to cover the state plus two).
    state
        The emitting state to relax, e.g. 'S1' (not the reference state).
    options
        Run options of both minimizations (coordinates, convergence, tracking, ...); the
        convergence preset's force threshold also decides whether the start is a minimum.
    relax_ground
        Always relax the ground state first (otherwise only when the start is not a minimum).
    zero_point
        Harmonic frequencies at both minima (6N gradients each) and the 0-0 energy.
    run_dir
        A :class:`~surfcross.io.RunDirectory`; stages go to its child folders 'start',
        'ground', 'excited'. None: nothing is written.

    Returns
    -------
    TaskResult
        ``task`` 'emission'; final geometry = excited-state minimum; ``data`` holds
        ``absorption_ev``, ``emission_ev``, ``adiabatic_ev``, ``stokes_shift_ev`` ... .
    """
    label = parse_state(state)
    check_labels(geometry, [label])
    if label.is_reference:
        raise InputError(f"{label} is the ground (reference) state: choose an excited state "
                         "to emit from, e.g. S1")
    spec = prepare_method(method, [label], geometry)
    own = engine is None
    engine = engine or build_engine(spec, run_dir, warm_start=options.warm_start,
                                    follow_instability=options.follow_instability)
    try:
        return _run(geometry, spec, label, options, relax_ground, zero_point, run_dir,
                    progress, engine)
    finally:
        if own:
            engine.close()


def _child(run_dir: Any, name: str) -> Any:
    return None if run_dir is None else run_dir.child(name)


def _run(geometry: Geometry, spec: MethodSpec, label: StateLabel, options: RunOptions,
         relax_ground: bool, zero_point: bool, run_dir: Any, progress: bool,
         engine: Any) -> TaskResult:
    notes: list[str] = []
    start = compute_states(geometry, spec, run_dir=_child(run_dir, "start"), engine=engine)
    ref = _reference(start.evaluation)
    start_eval = engine.gradients(start.evaluation, [ref])
    is_min, sentence = start_is_minimum(start_eval.gradient(ref), options)
    log.info("%s", sentence)
    if not is_min:
        notes.append(sentence)
    ground = None
    fc_eval, fc_root = start_eval, label
    if relax_ground or not is_min:
        why = "as asked" if relax_ground else "because the start is not a minimum"
        log.info("relaxing %s first (%s)", ref, why)
        notes.append(f"{ref} was relaxed first ({why}); absorption is computed at its minimum")
        ground = relax(geometry, ref, spec, options=options, run_dir=_child(run_dir, "ground"),
                       progress=progress, engine=engine)
        fc_eval = ground.evaluation
        fc_root, overlap = carrier_root(engine, start_eval, label, fc_eval)
        if fc_root != label:
            notes.append(f"at the ground-state minimum the state called {label} at the start "
                         f"is root {fc_root} (overlap {overlap:.2f})")
        if overlap < LOW_OVERLAP:
            notes.append(f"{label} changes character between the start and the ground-state "
                         f"minimum (overlap {overlap:.2f}): the absorption may belong to "
                         "another state")
    log.info("relaxing %s", label)
    excited = relax(geometry, label, spec, options=options, run_dir=_child(run_dir, "excited"),
                    progress=progress, engine=engine)
    em_eval = excited.evaluation
    em_root = parse_state(excited.optimization.value.info.get("root", str(label)))
    data, more = _numbers(engine, fc_eval, fc_root, em_eval, em_root, ref, ground, excited,
                          zero_point, start_eval)
    notes += more
    data["ground_check"] = sentence
    return _finish(geometry, spec, label, options, run_dir, start, ground, excited, data, notes)


def _numbers(engine: Any, fc_eval: Evaluation, fc_root: StateLabel, em_eval: Evaluation,
             em_root: StateLabel, ref: StateLabel, ground: TaskResult | None,
             excited: TaskResult, zero_point: bool, start_eval: Evaluation):
    notes: list[str] = []
    absorb, emit = _band(fc_eval, fc_root), _band(em_eval, em_root)
    e_ground_min = fc_eval.energy(ref)
    e_excited_min = em_eval.energy(em_root)
    adiabatic = (e_excited_min - e_ground_min) * HARTREE_IN_EV
    if emit["ev"] <= 0.0:
        notes.append(f"at the excited-state end point {em_root} lies at or below {ref}: the "
                     "state reached a crossing with the ground state (a funnel), so there is no "
                     "emission from a minimum; linear response is unreliable there")
    if em_root.index > 1:  # 0 for the reference, 1 for the lowest excited state of a manifold
        lowest = StateLabel(em_root.manifold, 1)
        notes.append(f"at the excited-state minimum the followed state is root {em_root}: a lower "
                     f"state of the same spin ({lowest}) lies below it, so by Kasha's rule the "
                     f"molecule is likely to convert to {lowest} before it emits; compare with "
                     f"the emission of {lowest}")
    if em_eval.energy(ref) < e_ground_min - 1e-6:
        notes.append(f"{ref} at the excited-state minimum lies below the ground-state minimum "
                     "used: the ground-state minimum is not the lowest; relax the ground state "
                     "from another start")
    stokes = absorb["ev"] - emit["ev"]
    data: dict[str, Any] = {
        "absorption_ev": absorb["ev"], "absorption_nm": absorb["nm"],
        "absorption_oscillator_strength": absorb["oscillator_strength"],
        "absorption_root": absorb["root"],
        "emission_ev": emit["ev"], "emission_nm": emit["nm"],
        "emission_oscillator_strength": emit["oscillator_strength"],
        "emission_root": emit["root"],
        "adiabatic_ev": adiabatic,
        "stokes_shift_ev": stokes, "stokes_shift_cm": ev_to_wavenumber(stokes),
        "ground_minimum_eh": e_ground_min, "excited_minimum_eh": e_excited_min,
        "ground_relaxed": ground is not None,
        "absorption_states": [r.to_dict() for r in vertical_rows(fc_eval)],
        "start_states": [r.to_dict() for r in vertical_rows(start_eval)],
        "emission_states": [r.to_dict() for r in vertical_rows(em_eval)],
    }
    if zero_point:
        zpe_g, n_g = _zero_point(engine, ground, fc_eval.geometry, ref)
        zpe_e, n_e = _zero_point(engine, excited, em_eval.geometry, em_root)
        data["zero_zero_ev"] = adiabatic + zpe_e["zero_point_ev"] - zpe_g["zero_point_ev"]
        data["curvature_ground"], data["curvature_excited"] = zpe_g, zpe_e
        data["curvature_evaluations"] = n_g + n_e
        for name, c in (("ground", zpe_g), ("excited", zpe_e)):
            if c.get("imaginary_cm"):
                notes.append(f"the {name}-state point has imaginary frequencies "
                             f"{c['imaginary_cm']} cm^-1: not a minimum, so its zero-point "
                             "energy and the 0-0 energy are not meaningful")
    return data, notes


def _states_table(rows: list[dict[str, Any]]) -> str:
    lines = ["| state | above reference / eV | wavelength / nm | oscillator strength |",
             "| --- | --- | --- | --- |"]
    for r in rows:
        nm = "-" if r["wavelength_nm"] is None else f"{r['wavelength_nm']:.1f}"
        f = "-" if r["oscillator_strength"] is None else f"{r['oscillator_strength']:.4f}"
        lines.append(f"| {r['label']} | {r['excitation_ev']:.4f} | {nm} | {f} |")
    return "\n".join(lines)


def _summary_text(data: Mapping[str, Any], label: StateLabel) -> str:
    def root(key: str) -> str:
        return (f"{label}, adiabatic root {data[key]} there" if data[key] != str(label)
                else str(label))

    def nm(x: Any) -> str:
        return "-" if x is None else f"{x:.1f} nm"

    def f(x: Any) -> str:
        return "-" if x is None else f"{x:.4f}"

    lines = [
        f"- Vertical absorption ({root('absorption_root')} at the Franck-Condon point): "
        f"{data['absorption_ev']:.4f} eV, {nm(data['absorption_nm'])}, f = "
        f"{f(data['absorption_oscillator_strength'])}",
        f"- Vertical emission ({root('emission_root')} at the excited-state minimum): "
        f"{data['emission_ev']:.4f} eV, {nm(data['emission_nm'])}, f = "
        f"{f(data['emission_oscillator_strength'])}",
        f"- Adiabatic energy (minimum to minimum): {data['adiabatic_ev']:.4f} eV",
        f"- Stokes shift (absorption - emission): {data['stokes_shift_ev']:.4f} eV = "
        f"{data['stokes_shift_cm']:.0f} cm^-1",
    ]
    if "zero_zero_ev" in data:
        lines.append(f"- Zero-point corrected 0-0 energy: {data['zero_zero_ev']:.4f} eV")
    return "\n".join(lines)


def _profile(data: Mapping[str, Any], em_eval: Evaluation, label: StateLabel,
             ref: StateLabel) -> dict[str, Any]:
    """A two-point energy diagram: ground-state minimum (0) and excited-state minimum (1)."""
    base = data["ground_minimum_eh"]
    return {"x": [0.0, 1.0],
            "curves_ev": {str(ref): [0.0, (em_eval.energy(ref) - base) * HARTREE_IN_EV],
                          str(label): [data["absorption_ev"], data["adiabatic_ev"]]},
            "xlabel": "0 = ground-state minimum, 1 = excited-state minimum"}


def _finish(geometry: Geometry, spec: MethodSpec, label: StateLabel, options: RunOptions,
            run_dir: Any, start: TaskResult, ground: TaskResult | None, excited: TaskResult,
            data: dict[str, Any], notes: list[str]) -> TaskResult:
    stages = [r for r in (ground, excited) if r is not None]
    converged = all(r.converged for r in stages)
    failed = next((r for r in stages if not r.converged), None)
    status = "converged" if converged else failed.status
    message = "" if converged else f"the {failed.states[0]} minimization: {failed.message}"
    em_eval = excited.evaluation
    ref = _reference(em_eval)
    if label.index > 1:
        notes.append(f"{label} is not the lowest excited state: by Kasha's rule most molecules "
                     "emit from the lowest excited state of a given multiplicity")
    warnings = merge_warnings(method_warnings(spec, [label]), notes,
                              *(r.warnings for r in stages))
    evaluations = (1 + sum(r.evaluations for r in stages)
                   + int(data.get("curvature_evaluations", 0)))
    out = {
        "task": "emission", "converged": converged, "status": status, "message": message,
        "iterations": sum(r.iterations for r in stages), "evaluations": evaluations,
        "states": [str(label)], "energies_eh": {str(label): data["excited_minimum_eh"]},
        "adiabatic_energies_eh": em_eval.energies(),
        "followed_roots": {str(label): str(data["emission_root"])},
        "gap_ev": None, "method": {**spec.to_dict(), "charge": geometry.charge,
                                   "spin": geometry.spin},
        "search": None, "warnings": warnings, **data,
        "stages": [stage_summary("start", start)] + [
            stage_summary(name, r) for name, r in (("ground", ground), ("excited", excited))
            if r is not None],
    }
    order = "adiabatic roots in energy order; the followed {} is root {} there"
    sections = [("Photophysics", _summary_text(data, label)),
                ("What these numbers are", SPECTRA_NOTE),
                ("Vertical states at the Franck-Condon point ("
                 + order.format(label, data["absorption_root"]) + ")",
                 _states_table(data["absorption_states"])),
                ("Vertical states at the excited-state minimum ("
                 + order.format(label, data["emission_root"]) + ")",
                 _states_table(data["emission_states"])),
                ("Stages", "\n".join(f"- {s['stage']}: {s['status']}, {s['iterations']} steps, "
                                     f"{s['evaluations']} evaluations, folder `{s['run_dir']}`"
                                     for s in out["stages"]))]
    if run_dir is not None:
        out = run_dir.finish(out, excited.geometry, sections=sections,
                             profile=_profile(data, em_eval, label, ref))
    else:
        out = complete_result(out)
    return TaskResult(task="emission", converged=converged, status=status, message=message,
                      geometry=excited.geometry, evaluation=em_eval, states=(str(label),),
                      method=spec, iterations=out["iterations"], evaluations=evaluations,
                      warnings=tuple(out["warnings"]), data=out,
                      run_dir=None if run_dir is None else run_dir.path)
