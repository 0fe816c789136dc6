"""Bad input on the command line and in job files: exit code 2 and one line, never a traceback.

Each case runs the installed ``surfcross`` program in a subprocess, as a user would, a few
cases at a time (they are independent).
The expectations are our own command-line contract (exit code 2 = bad input, one line on
stderr that says what is wrong); the chemistry behind the charge/spin case is the electron
count parity rule (common practice: 2S must have the parity of the electron count).
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path

import pytest

pytestmark = pytest.mark.pyscf

# water near its experimental structure, angstrom (our own test input)
WATER = "3\nwater\nO 0.0 0.0 0.1173\nH 0.0 0.7572 -0.4692\nH 0.0 -0.7572 -0.4692\n"

JOB_HEAD = 'title = "t"\n[molecule]\nfile = "water.xyz"\n[method]\nmethod = "cis"\n'

FILES = {
    "water.xyz": WATER,
    "empty.xyz": "",
    "malformed.xyz": "3\n\nO 0 0 0\nH 0 0 0.96\nH 0.9 0 x\n",
    "unknown_element.xyz": "3\n\nO 0 0 0\nH 0 0 0.96\nXq 0.9 0 0\n",
    "too_close.xyz": "3\n\nO 0 0 0\nH 0 0 0.96\nH 0 0 0.97\n",
    "bad.toml": JOB_HEAD + "[[task]\nkind = 'relax'\n",
    "unknown_key.toml": JOB_HEAD + "[[task]]\nkind = 'relax'\nstate = 'S1'\nmax_iteration = 5\n",
    "unknown_kind.toml": JOB_HEAD + "[[task]]\nkind = 'relx'\nstate = 'S1'\n",
    "unknown_method_key.toml": JOB_HEAD + "basis_set = 'sto-3g'\n[[task]]\nkind = 'states'\n",
    "bad_from.toml": JOB_HEAD + "[[task]]\nkind = 'cross'\nfrom = 'nowhere'\nstates = ['S1', 'S2']\n",
    "bad_state.toml": JOB_HEAD + "[[task]]\nkind = 'relax'\nstate = 'Q2'\n",
    "open_shell_label.toml": ('[molecule]\nfile = "water.xyz"\ncharge = 1\nspin = 1\n[method]\n'
                              "method = 'cis'\nunrestricted = true\n[[task]]\nkind = 'relax'\n"
                              "state = 'S1'\n"),
    "no_tasks.toml": JOB_HEAD,
    "state_too_high.toml": JOB_HEAD + "[[task]]\nkind = 'relax'\nstate = 'S11'\n",
    "frozen_atom_missing.toml": JOB_HEAD + ("[[task]]\nkind = 'relax'\nstate = 'S1'\n"
                                            "frozen_atoms = [4]\n"),
}

# (id, arguments, text the one error line must contain)
CASES = [
    ("missing file", ["states", "nothere.xyz"], "'nothere.xyz' does not exist"),
    ("empty file", ["states", "empty.xyz"], "empty.xyz is empty"),
    ("malformed xyz", ["states", "malformed.xyz"], "malformed.xyz, line 5"),
    ("unknown element", ["states", "unknown_element.xyz"],
     "unknown_element.xyz, line 5: unknown element 'Xq'"),
    ("atoms too close", ["states", "too_close.xyz"], "too_close.xyz, lines 4 and 5"),
    # 9 electrons cannot be a singlet (parity of the electron count, common practice)
    ("impossible charge/spin", ["states", "water.xyz", "--charge", "1"], "cannot have 2S = 0"),
    ("spin above electrons", ["states", "water.xyz", "--spin", "12"], "exceeds the 10 electrons"),
    ("unknown state label", ["relax", "water.xyz", "--state", "X1"], "unknown state label 'X1'"),
    ("same state twice", ["cross", "water.xyz", "--states", "S1,S1"], "the same state is given twice"),
    ("one state for a crossing", ["cross", "water.xyz", "--states", "S1"], "expected 2 state label"),
    ("T0", ["relax", "water.xyz", "--state", "T0"], "there is no T0"),
    ("open-shell label on closed shell", ["relax", "water.xyz", "--state", "2"], "use S/T labels"),
    ("unknown method", ["states", "water.xyz", "--method", "mp9"], "invalid choice: 'mp9'"),
    ("unknown basis", ["states", "water.xyz", "--basis", "no-such-basis"], "basis 'no-such-basis'"),
    ("unknown functional", ["states", "water.xyz", "--method", "tddft", "--xc", "nofunc"],
     "functional 'nofunc'"),
    ("unknown search", ["cross", "water.xyz", "--states", "S1,S2", "--search", "zigzag"],
     "invalid choice: 'zigzag'"),
    ("step limit zero", ["relax", "water.xyz", "--state", "S1", "--max-steps", "0"],
     "step limit must be >= 1"),
    ("bad active space", ["states", "water.xyz", "--method", "casscf", "--active-space", "x"],
     "--active-space expects"),
    ("out is a file", ["relax", "water.xyz", "--state", "S1", "--out", "water.xyz"], "is a file"),
    ("missing job file", ["run", "nojob.toml"], "'nojob.toml' does not exist"),
    ("bad TOML", ["run", "bad.toml"], "not valid TOML"),
    ("unknown TOML key", ["run", "unknown_key.toml"],
     "unknown key 'max_iteration'; did you mean 'max_iterations'?"),
    ("unknown task kind", ["run", "unknown_kind.toml"], "did you mean 'relax'?"),
    ("unknown method key", ["run", "unknown_method_key.toml"], "unknown key 'basis_set'; did you mean 'basis'?"),
    ("unknown earlier task", ["run", "bad_from.toml"], "refers to 'nowhere', which is not an earlier task"),
    ("bad state in job", ["run", "bad_state.toml"], "unknown state label 'Q2'"),
    ("closed-shell label, open-shell molecule", ["run", "open_shell_label.toml"],
     "does not exist for an open-shell reference"),
    ("job without tasks", ["run", "no_tasks.toml"], "no tasks"),
    ("resume: not a directory", ["resume", "nowhere"], "is not a run directory"),
    ("resume: no checkpoint", ["resume", "emptyrun"], "no checkpoint"),
    ("resume: corrupted checkpoint", ["resume", "corrupted"], "checkpoint"),
    ("resume: bad step budget", ["resume", "emptyrun", "--more-steps", "0"], ">= 1"),
    ("demo into a file", ["demo", "--out", "water.xyz"], "is a file"),
    # water in STO-3G: 7 orbitals, 5 doubly occupied, so 5 x 2 = 10 singlet excitations
    # (orbital counting, common practice)
    ("state beyond the excitations", ["relax", "water.xyz", "--state", "S11", "--method", "cis"],
     "so the states go up to S10"),
    ("triplet beyond the excitations", ["cross", "water.xyz", "--states", "S1,T12"],
     "so the states go up to T10"),
    ("more roots than excitations", ["states", "water.xyz", "--roots", "12"],
     "12 roots asked, but OH2 in sto-3g has 10 excitations"),
    ("state beyond the excitations in a job", ["run", "state_too_high.toml"],
     "state S11 does not exist"),
    ("frozen atom beyond the molecule", ["relax", "water.xyz", "--state", "S1", "--freeze", "4"],
     "atom 4, but the molecule has 3 atoms"),
    ("held atom beyond the molecule", ["relax", "water.xyz", "--state", "S0", "--hold", "1,2,7"],
     "atom 7, but the molecule has 3 atoms"),
    ("frozen atom beyond the molecule in a job", ["run", "frozen_atom_missing.toml"],
     "'frozen_atoms' must be <= 3, got 4"),
    # CASSCF(2,2) has 3 singlet CSFs (Weyl's dimension formula, common practice)
    ("CASSCF state beyond the active space",
     ["relax", "water.xyz", "--state", "S3", "--method", "casscf", "--active-space", "2,2"],
     "has 3 singlet states (S0..S2)"),
    ("active space larger than the basis",
     ["relax", "water.xyz", "--state", "S1", "--method", "casscf", "--active-space", "4,9"],
     "7 orbitals, too few for 3 core plus 9 active orbitals"),
    ("no subcommand arguments", ["relax"], "the following arguments are required"),
]


#: program starts running at once
PARALLEL = 4


def program() -> list[str]:
    exe = shutil.which("surfcross")
    return [exe] if exe else [sys.executable, "-m", "surfcross.cli.main"]


@pytest.fixture(scope="module")
def outcomes(tmp_path_factory) -> dict[str, subprocess.CompletedProcess]:
    work: Path = tmp_path_factory.mktemp("bad_input")
    for name, text in FILES.items():
        (work / name).write_text(text)
    (work / "emptyrun").mkdir()
    (work / "corrupted").mkdir()
    (work / "corrupted" / "checkpoint.h5").write_bytes(b"\x89HDF\r\n\x1a\n" + b"\0garbage" * 20)
    env = dict(os.environ, OMP_NUM_THREADS="1")

    def one(case_args):
        case, args = case_args
        proc = subprocess.run(program() + ["-q", *args], cwd=work, env=env, text=True,
                              capture_output=True, timeout=600)
        return case, proc

    # a few at a time: the cases are independent, and the machine may be shared
    with ThreadPoolExecutor(max_workers=PARALLEL) as pool:
        return dict(pool.map(one, [(case, args) for case, args, _ in CASES]))


@pytest.mark.slow
@pytest.mark.parametrize("case,args,expected", CASES, ids=[c[0] for c in CASES])
def test_bad_input_gives_exit_2_and_one_line(outcomes, case, args, expected):
    proc = outcomes[case]
    lines = [ln for ln in proc.stderr.splitlines() if ln.strip()]
    assert "Traceback" not in proc.stderr
    assert proc.returncode == 2, (args, proc.returncode, proc.stderr)
    assert len(lines) == 1, lines
    assert lines[0].startswith("surfcross: error:")
    assert expected in lines[0], lines[0]


@pytest.mark.slow
def test_unknown_key_message_says_how_to_fix(outcomes):
    line = outcomes["unknown TOML key"].stderr.strip()
    # names the file, the task and the nearest valid key
    assert "unknown_key.toml" in line
    assert "task 1" in line or "task 'relax'" in line


def test_impossible_state_costs_no_engine_call(tmp_path, monkeypatch, capsys):
    """HF in STO-3G has 5 singlet excitations (5 occupied x 1 virtual orbital): S9 is refused
    before any SCF. Counted as calls into the engine and the SCF driver, not as wall time."""
    from surfcross.cli import main as cli
    from surfcross.engine import pyscf_response, pyscf_scf

    calls = []
    real_states, real_scf = pyscf_response.PySCFResponseEngine.states, pyscf_scf.run_reference

    def counted_states(self, geometry):
        calls.append("states")
        return real_states(self, geometry)

    def counted_scf(*args, **kwargs):
        calls.append("scf")
        return real_scf(*args, **kwargs)

    monkeypatch.setattr(pyscf_response.PySCFResponseEngine, "states", counted_states)
    monkeypatch.setattr(pyscf_response, "run_reference", counted_scf)
    monkeypatch.chdir(tmp_path)
    (tmp_path / "hf.xyz").write_text("2\nhydrogen fluoride\nH 0 0 0\nF 0 0 0.917\n")
    code = cli.main(["relax", "hf.xyz", "--state", "S9", "--roots", "3", "--method", "cis",
                     "--basis", "sto-3g"])
    err = [ln for ln in capsys.readouterr().err.splitlines() if ln.strip()]
    assert code == 2 and calls == []
    assert len(err) == 1 and "so the states go up to S5" in err[0], err
    assert not any(tmp_path.glob("hf_relax*"))  # no run folder is left behind
    # the same counters do see a possible request (so the count above can fail)
    code = cli.main(["-q", "states", "hf.xyz", "--roots", "5", "--method", "cis"])
    assert code == 0 and calls.count("scf") == 1 and calls.count("states") == 1
