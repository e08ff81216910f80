"""Hypothesis profiles and the ``nightly`` marker.

Profiles
--------
``default``  fast CI profile: few examples per property (the whole property file runs in
             well under a minute), no deadline, derandomized so CI is reproducible.
``nightly``  thousands of examples per property, random seeds; selected with the
             environment variable ``LTI_AUDIT_PROFILE=nightly`` or ``pytest --nightly``.

Tests marked ``@pytest.mark.nightly`` run only under the nightly profile; by default they
are skipped with a reason.  Spread a nightly run over local cores with pytest-xdist:
``LTI_AUDIT_PROFILE=nightly pytest -n 2 tests/test_properties.py``.
"""

from __future__ import annotations

import os

import pytest
from hypothesis import HealthCheck, settings

settings.register_profile(
    "default",
    max_examples=12,
    deadline=None,
    derandomize=True,
    suppress_health_check=[HealthCheck.too_slow, HealthCheck.filter_too_much],
    print_blob=True,
)
settings.register_profile(
    "nightly",
    max_examples=2000,
    deadline=None,
    suppress_health_check=[HealthCheck.too_slow, HealthCheck.filter_too_much],
    print_blob=True,
)


def pytest_addoption(parser: pytest.Parser) -> None:
    parser.addoption("--nightly", action="store_true", default=False,
                     help="lti-audit: use the long 'nightly' hypothesis profile and run "
                     "tests marked nightly (same as LTI_AUDIT_PROFILE=nightly)")


def nightly_enabled(config: pytest.Config) -> bool:
    return bool(config.getoption("--nightly")) or os.environ.get("LTI_AUDIT_PROFILE") == "nightly"


def pytest_configure(config: pytest.Config) -> None:
    settings.load_profile("nightly" if nightly_enabled(config) else "default")


def pytest_collection_modifyitems(config: pytest.Config, items: list[pytest.Item]) -> None:
    if nightly_enabled(config):
        return
    skip = pytest.mark.skip(reason="nightly only: run with --nightly or LTI_AUDIT_PROFILE=nightly")
    for item in items:
        if "nightly" in item.keywords:
            item.add_marker(skip)
