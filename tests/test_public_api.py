"""The public API is pinned: nothing leaks by accident, nothing disappears silently.

A change of the public names is a decision: update tests/data/public_api.json with it (the
habit of SciPy's public-API test).
"""

import importlib
import json
from pathlib import Path

import pytest

PINNED = json.loads((Path(__file__).parent / "data" / "public_api.json").read_text())


@pytest.mark.parametrize("module", sorted(PINNED))
def test_public_names_are_pinned(module):
    mod = importlib.import_module(module)
    names = sorted(getattr(mod, "__all__"))
    assert names == PINNED[module], f"{module}.__all__ changed; update tests/data/public_api.json if intended"
    for name in names:
        assert hasattr(mod, name), f"{module}.{name} is listed but missing"
        assert not name.startswith("_") or name == "__version__"


@pytest.mark.parametrize("module", sorted(PINNED))
def test_public_functions_are_documented(module):
    mod = importlib.import_module(module)
    assert mod.__doc__, module
    for name in mod.__all__:
        obj = getattr(mod, name)
        if callable(obj):
            assert obj.__doc__, f"{module}.{name} has no docstring"


def test_old_pipeline_names_forward_with_a_warning():
    import fusion.campaign as new
    import fusion.pipeline as old

    with pytest.warns(DeprecationWarning, match="fusion.campaign.run_campaign"):
        assert old.run_campaign is new.run_campaign
    with pytest.raises(AttributeError):
        old.compute_run
