"""Shared test settings: hypothesis profiles sized for a 2-core machine.

``ci`` (chosen when the environment variable CI is set to true, as .ci/run
does) is derandomised: every run draws the same examples, so a green run can
be repeated exactly. ``local`` (the default elsewhere) draws new random
examples on every run and more of them, to keep finding new cases; a failure
it finds is printed with its seed and belongs in the test as an ``@example``.
``HYPOTHESIS_PROFILE=ci`` or ``=local`` picks one explicitly.
"""

import os

from hypothesis import HealthCheck, settings

COMMON = dict(deadline=None, suppress_health_check=[HealthCheck.too_slow])

settings.register_profile("ci", max_examples=25, derandomize=True, print_blob=True, **COMMON)
# derandomize=False said outright: hypothesis itself derandomises when it sees CI set
settings.register_profile("local", max_examples=50, derandomize=False, print_blob=True, **COMMON)


def _profile() -> str:
    chosen = os.environ.get("HYPOTHESIS_PROFILE", "").strip().lower()
    if chosen:
        return chosen
    return "ci" if os.environ.get("CI", "").strip().lower() in ("1", "true", "yes") else "local"


settings.load_profile(_profile())
