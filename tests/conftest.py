"""Shared pytest configuration: the ``--slow`` tier."""
import numpy as np
import pytest


def pytest_addoption(parser):
    parser.addoption("--slow", action="store_true", default=False,
                     help="also run tests marked slow")


def pytest_collection_modifyitems(config, items):
    if config.getoption("--slow"):
        return
    skip = pytest.mark.skip(reason="slow: run with --slow")
    for item in items:
        if "slow" in item.keywords:
            item.add_marker(skip)


def model_from_components(components, **model_keys):
    """MassModel from component tables written as in a model file (strings with units)."""
    from icgen.model import MassModel
    from icgen.spec import spec_from_dict
    data = {"model": {"name": "test model", "seed": 1, **model_keys}, "components": components}
    return MassModel(spec_from_dict(data))


@pytest.fixture(scope="session")
def default_model():
    """The built-in default model (potential built once per test session)."""
    from icgen.model import MassModel
    from icgen.spec import load_spec
    return MassModel(load_spec(None))


def uncut_mass(profile, scale=1.0, mass=1e10, outer=5000.0):
    """M of the uncut law whose density a cut Hernquist or Plummer sphere of total ``mass``
    (Msun, cut at ``outer`` kpc, scale ``scale`` kpc) has inside its outer radius:
    2 pi rho0 a^3 (Hernquist 1990, eq. 2) or 4 pi rho0 b^3 / 3 (Plummer 1911). With the far
    cut at 5000 a, M = mass (1 + 1.6e-4) for Hernquist."""
    from icgen.spec import SpheroidSpec
    from icgen.profiles.spheroid import finite_law
    spec = SpheroidSpec(name="b", kind="bulge", profile=profile, mass=mass, scale_radius=scale,
                        outer_radius=outer)
    factor = {"hernquist": 2 * np.pi, "plummer": 4 * np.pi / 3}[profile]
    return factor * finite_law(spec).rho0 * scale**3
