"""TOML job files: parsing, validation and error messages.

TOML syntax is checked by the standard library's tomllib (reference parser); the suggested
key in error messages comes from difflib, which the tests do not second-guess beyond obvious
one-letter typos.
"""

import re
from pathlib import Path

import numpy as np
import pytest

from surfcross import jobs
from surfcross.engine.base import MethodSpec
from surfcross.errors import InputError
from surfcross.jobs import KeyRule, TaskKind, parse_job, read_job, register_task_kind

README = Path(__file__).resolve().parents[1] / "README.md"

WATER_XYZ = """3
water
O 0.0 0.0 0.0
H 0.0 0.7572 0.5865
H 0.0 -0.7572 0.5865
"""

GOOD = """
title = "water test"
[molecule]
file = "geo/water.xyz"
[method]
method = "cis"
basis = "sto-3g"
roots = 4
[[task]]
name = "ground"
kind = "relax"
state = "s0"
max_force = 1e-4
frozen_atoms = [1]
[[task]]
kind = "relax"
from = "ground"
state = "S1"
[[task]]
kind = "cross"
from = "relax"
states = ["S1", "S2"]
search = "Penalty"
[[task]]
kind = "path"
geometries = ["ground", "geo/water.xyz", "cross"]
[[task]]
kind = "scan"
atoms = [2, 1, 3]
values = [100, 104.5, 110]
relax = true
state = "S0"
"""


@pytest.fixture
def job_dir(tmp_path):
    (tmp_path / "geo").mkdir()
    (tmp_path / "geo" / "water.xyz").write_text(WATER_XYZ)
    return tmp_path


def _write(job_dir, text, name="job.toml"):
    path = job_dir / name
    path.write_text(text)
    return path


def test_good_job(job_dir):
    job = read_job(_write(job_dir, GOOD))
    assert job.title == "water test" and job.molecule.symbols == ("O", "H", "H")
    assert job.method == MethodSpec(method="cis", basis="sto-3g", roots=4)
    assert job.method_keys == ("method", "basis", "roots")
    assert [t.name for t in job.tasks] == ["ground", "relax", "cross", "path", "scan"]
    ground, relax, cross, path, scan = job.tasks
    assert ground.options == {"state": "S0", "max_force": 1e-4, "frozen_atoms": (1,)}
    assert relax.start_from == "ground" and cross.start_from == "relax"
    assert cross.options["states"] == ("S1", "S2") and cross.options["search"] == "penalty"
    assert path.options["geometries"] == (
        ("task", "ground"), ("file", str((job_dir / "geo" / "water.xyz").resolve())), ("task", "cross"))
    assert scan.options["values"] == (100.0, 104.5, 110.0) and scan.options["relax"] is True
    with pytest.raises(TypeError):
        ground.options["state"] = "S1"  # read-only
    assert job.task("scan") is scan
    import pickle  # jobs travel to worker processes
    again = pickle.loads(pickle.dumps(job))
    assert again.tasks == job.tasks and again.method == job.method
    assert job.source == (job_dir / "job.toml").resolve()


def test_inline_xyz_and_example(job_dir):
    inline = GOOD.replace('file = "geo/water.xyz"',
                          'xyz = """\nO 0 0 0\nH 0 0.7572 0.5865\nH 0 -0.7572 0.5865\n"""\ncharge = 1\nspin = 1')
    job = parse_job(inline, base_dir=job_dir)
    assert job.molecule.charge == 1 and job.molecule.spin == 1 and job.molecule.natom == 3
    ref = read_job(_write(job_dir, GOOD)).molecule
    np.testing.assert_allclose(job.molecule.coords_bohr, ref.coords_bohr)
    example = parse_job(GOOD.replace('file = "geo/water.xyz"', 'example = "formaldehyde"'),
                        base_dir=job_dir)
    assert example.molecule.symbols == ("C", "O", "H", "H")


def test_readme_example_parses():
    text = README.read_text()
    section = text[text.index("## Job files"):]
    block = re.search(r"```toml\n(.*?)```", section, re.S).group(1)
    job = parse_job(block, source="README example")
    assert [t.kind for t in job.tasks] == ["states", "relax", "cross", "path"]
    # every registered key is documented in that section
    for kind in jobs.TASK_KINDS.values():
        assert f"`{kind.name}`" in section
        for key in kind.keys:
            assert f"`{key}`" in section, key


@pytest.mark.parametrize("old,new,message", [
    ('state = "s0"', 'stat = "s0"', "unknown key 'stat'; did you mean 'state'"),
    ("[molecule]", "[molecul]", "unknown key 'molecul'; did you mean 'molecule'"),
    ('basis = "sto-3g"', 'basi = "sto-3g"', "unknown key 'basi'; did you mean 'basis'"),
    ('file = "geo/water.xyz"', 'flie = "geo/water.xyz"', "did you mean 'file'"),
    ('kind = "scan"', 'kind = "scna"', "unknown task kind 'scna'; did you mean 'scan'"),
    ("max_force = 1e-4", "max_forces = 1e-4", "did you mean 'max_force'"),
])
def test_unknown_keys_suggest(job_dir, old, new, message):
    with pytest.raises(InputError, match=re.escape(message)):
        read_job(_write(job_dir, GOOD.replace(old, new, 1)))


@pytest.mark.parametrize("old,new,message", [
    ('from = "ground"', 'from = "scan"', "refers to 'scan', which is not an earlier task"),
    ('from = "ground"', 'from = "nothing"', "earlier tasks: ground"),
    ('from = "relax"', 'from = "cross"', "not an earlier task"),
    ('"ground", "geo/water.xyz"', '"ground", "geo/missing.xyz"', "missing.xyz' does not exist"),
    ('kind = "scan"', 'from = "path"\nkind = "scan"', "ends with no single geometry"),
    ('kind = "relax"\nfrom', 'name = "ground"\nkind = "relax"\nfrom', "two tasks have this name"),
    ('state = "s0"', 'state = "Q1"', "unknown state label 'Q1'"),
    ('states = ["S1", "S2"]', 'states = ["S1"]', "'states' needs 2 entries, got 1"),
    ('states = ["S1", "S2"]', 'states = ["S1", "s1"]', "the same state is given twice"),
    ('search = "Penalty"', 'search = "fastest"', "'search' must be one of auto, penalty"),
    ("atoms = [2, 1, 3]", "atoms = [2, 1, 9]", "'atoms' must be <= 3, got 9"),
    ("atoms = [2, 1, 3]", "atoms = [2, 2]", "names the same atom twice"),
    ('relax = true\nstate = "S0"', "relax = true", "needs 'state'"),
    ("max_force = 1e-4", "max_force = -1e-4", "'max_force' must be > 0"),
    ("max_force = 1e-4", 'max_force = "small"', "'max_force' must be a number"),
    ('kind = "cross"', 'kind = "cross"\nmax_iterations = 2.5', "'max_iterations' must be an integer"),
    ("roots = 4", 'roots = "four"', "'roots' must be an integer"),
    ('method = "cis"', 'method = "cis"\nxc = "b3lyp"', "Hartree-Fock based"),
    ('file = "geo/water.xyz"', 'file = "geo/water.xyz"\nexample = "water"', "exactly one of"),
    ('file = "geo/water.xyz"', 'file = "geo/water.xyz"\nspin = 1', "cannot have 2S = 1"),
    ('kind = "path"', 'kind = "path"\nimages = 0', "'images' must be >= 1"),
    ('state = "S1"', 'state = "S1"\nstate2 = "S1"', "unknown key 'state2'"),
])
def test_validation_errors(job_dir, old, new, message):
    assert old in GOOD
    with pytest.raises(InputError, match=re.escape(message)):
        read_job(_write(job_dir, GOOD.replace(old, new, 1)))


def test_errors_name_the_file_and_task(job_dir):
    path = _write(job_dir, GOOD.replace('state = "s0"', 'state = "X"'))
    with pytest.raises(InputError) as info:
        read_job(path)
    assert str(info.value).startswith(f"{path}, task 'ground':")


def test_bad_toml_and_missing_file(job_dir):
    with pytest.raises(InputError, match=r"not valid TOML.*line 3"):
        read_job(_write(job_dir, '[molecule]\nfile = "a.xyz"\nroots = \n'))
    with pytest.raises(InputError, match="does not exist"):
        read_job(job_dir / "nope.toml")
    with pytest.raises(InputError, match="not a file"):
        read_job(job_dir)
    with pytest.raises(InputError, match="no tasks"):
        read_job(_write(job_dir, '[molecule]\nexample = "water"\n'))
    with pytest.raises(InputError, match=r"\[molecule\] table is required"):
        read_job(_write(job_dir, '[[task]]\nkind = "states"\n'))
    with pytest.raises(InputError, match="geometry file .*absent.xyz"):
        read_job(_write(job_dir, GOOD.replace("geo/water.xyz", "absent.xyz", 1)))


def test_new_kind_in_one_place(job_dir):
    register_task_kind(TaskKind(name="probe", doc="test kind",
                                keys={"radius": KeyRule(type="float", required=True, low=0.0,
                                                        open_low=True, doc="probe radius")}))
    try:
        job = parse_job('[molecule]\nexample = "water"\n[[task]]\nkind = "probe"\nradius = 0.1\n')
        assert job.tasks[0].options == {"radius": 0.1}
        with pytest.raises(InputError, match="needs 'radius'"):
            parse_job('[molecule]\nexample = "water"\n[[task]]\nkind = "probe"\n')
        with pytest.raises(ValueError, match="common key"):
            register_task_kind(TaskKind(name="bad", doc="", keys={"from": KeyRule(type="str", doc="")}))
    finally:
        jobs.TASK_KINDS.pop("probe", None)


def test_method_from_saved_dict():
    spec = MethodSpec(method="casscf", active_space=(2, 2), state_weights=(0.5, 0.5))
    assert jobs.method_spec_from_dict(spec.to_dict()) == spec
    with pytest.raises(InputError, match="did you mean 'roots'"):
        jobs.method_spec_from_dict({"rots": 3})


def test_smiles_molecule():
    pytest.importorskip("rdkit")
    job = parse_job('[molecule]\nsmiles = "C=O"\n[[task]]\nkind = "states"\n')
    assert sorted(job.molecule.symbols) == ["C", "H", "H", "O"] and job.molecule.charge == 0
