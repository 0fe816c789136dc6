"""The shipped analytic surfaces: analytic gradients against central finite differences
(standard numerical check) and the stated minima (gradient zero, stated value there)."""

import numpy as np
import pytest

from surfcross.errors import InputError
from surfcross.testing import SURFACES, AnalyticObjective, SpringNetwork
from surfcross.geometry import Geometry


def _fd(f, x, h=1e-5):
    out = np.zeros_like(x)
    for i in range(x.size):
        e = np.zeros_like(x)
        e[i] = h
        out[i] = (f(x + e) - f(x - e)) / (2 * h)
    return out


@pytest.mark.parametrize("name", list(SURFACES))
def test_surface_gradient_and_minimum(name):
    surf = SURFACES[name]
    rng = np.random.default_rng(1)
    for x in (surf.start, surf.minimum + 0.3 * rng.normal(size=surf.ndim)):
        assert np.allclose(surf.gradient(x), _fd(surf.function, x), rtol=1e-6, atol=1e-7)
    assert np.allclose(surf.gradient(surf.minimum), 0.0, atol=1e-14)
    assert surf.function(surf.minimum) == pytest.approx(surf.minimum_value, abs=1e-14)
    # a strict minimum: nearby points are higher
    for _ in range(5):
        assert surf.function(surf.minimum + 1e-3 * rng.normal(size=surf.ndim)) > surf.minimum_value


def test_objective_maps_variables_onto_hydrogen_atoms():
    obj = AnalyticObjective.from_surface(SURFACES["tilted_bowl"])
    x = np.array([0.1, -0.2, 0.3, 0.4])
    geom = obj.geometry(x)
    assert geom.symbols == ("H", "H") and geom.spin == 0
    assert geom.distance(0, 1) > 1.0 / 0.529177  # more than 1 angstrom apart
    assert np.array_equal(obj.variables(geom), x)
    val = obj.evaluate(geom)
    assert val.exact_gradient and val.gradient.shape == (2, 3)
    assert np.allclose(val.gradient.ravel()[:4], SURFACES["tilted_bowl"].gradient(x))
    assert np.all(val.gradient.ravel()[4:] == 0.0)
    one = AnalyticObjective.from_surface(SURFACES["valley"])
    assert one.geometry([0.0, 0.0]).natom == 1 and one.geometry([0.0, 0.0]).spin == 1
    with pytest.raises(InputError):
        one.geometry([0.0, 0.0, 0.0])
    with pytest.raises(InputError):
        AnalyticObjective(lambda x: 0.0, lambda x: x, 7)


def test_spring_network_gradient():
    ref = Geometry.from_angstrom(["O", "H", "H"], [[0, 0, 0.12], [0, 0.76, -0.47], [0, -0.76, -0.47]])
    net = SpringNetwork(ref, net_force=[0.0, 0.0, 0.0])
    geom = ref.with_coords(ref.coords_bohr + 0.1 * np.random.default_rng(2).normal(size=(3, 3)))
    x0 = geom.coords_bohr.ravel()
    fd = _fd(lambda x: net.evaluate(ref.with_coords(x.reshape(3, 3))).value, x0)
    assert np.allclose(net.evaluate(geom).gradient.ravel(), fd, atol=1e-8)
    assert net.evaluate(ref).value == pytest.approx(0.0, abs=1e-24)
