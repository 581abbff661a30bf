"""Shared pytest configuration: the ``--slow`` tier."""
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
    from icgen.config import spec_from_dict
    data = {"model": {"name": "test model", "seed": 1, **model_keys}, "components": components}
    return MassModel(spec_from_dict(data))


@pytest.fixture(scope="session")
def default_model():
    """The built-in default model (potential built once per test session)."""
    from icgen.model import MassModel
    from icgen.config import load_spec
    return MassModel(load_spec(None))
