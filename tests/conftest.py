"""Hypothesis settings for the whole suite.

By default (and in CI) every property test is derandomised: the examples are
derived from the test itself, so two runs of the same code draw the same
examples and a failure in CI is a failure on any machine.  For a long local
hunt set ``COEFWIRE_HYPOTHESIS=long``: fresh random examples each run, ten
times as many as each test asks for, and failures kept in the local example
database so the next run replays them first.
"""

from __future__ import annotations

import os

import pytest
from hypothesis import HealthCheck, settings

# No deadline and no too-slow health check: both measure wall time, which a loaded CI
# machine (2 cores shared) stretches; no test here is about speed (speed lives in tools/).
_UNTIMED = dict(deadline=None, suppress_health_check=[HealthCheck.too_slow], print_blob=True)
settings.register_profile("ci", derandomize=True, database=None, **_UNTIMED)
settings.register_profile("long", derandomize=False, **_UNTIMED)

PROFILE = os.environ.get("COEFWIRE_HYPOTHESIS", "ci")
if PROFILE not in ("ci", "long"):
    raise RuntimeError(f"COEFWIRE_HYPOTHESIS={PROFILE!r}: use 'ci' (default) or 'long'")
settings.load_profile(PROFILE)

#: Examples per property test in the long profile, as a multiple of what the test asks.
LONG_FACTOR = 10


def pytest_collection_modifyitems(items) -> None:
    """In the long profile, multiply each property test's own ``max_examples``."""
    if PROFILE != "long":
        return
    for item in items:
        fn = getattr(item, "obj", None)
        own = getattr(fn, "_hypothesis_internal_use_settings", None)
        if own is not None and getattr(fn, "is_hypothesis_test", False):
            fn._hypothesis_internal_use_settings = settings(
                own, max_examples=own.max_examples * LONG_FACTOR)


@pytest.fixture(autouse=True)
def _progress_reports_on():
    """``--quiet`` sets a process-wide switch; reset it so one test's CLI call cannot
    silence the progress reports another test reads."""
    yield
    from codec._progress import set_quiet

    set_quiet(False)
