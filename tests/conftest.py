import os

os.environ.setdefault("MPLBACKEND", "Agg")


def pytest_collection_modifyitems(config, items):
    """Tests marked slow run only when asked for (``-m slow``, or any -m naming slow)."""
    import pytest

    if "slow" in (config.getoption("markexpr") or ""):
        return
    skip = pytest.mark.skip(reason="slow: run with -m slow")
    for item in items:
        if "slow" in item.keywords:
            item.add_marker(skip)
