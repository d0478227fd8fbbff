"""Settings for the whole test run.

Property-based tests (hypothesis) draw the same examples on every run (``derandomize``: seeded
from each test function), so a clean-machine CI run is reproducible; ``HYPOTHESIS_PROFILE=
explore`` draws new examples each run, to look for failures on purpose.
"""

from __future__ import annotations

import os

from hypothesis import settings

settings.register_profile("repeatable", derandomize=True)
settings.register_profile("explore", derandomize=False)
settings.load_profile(os.environ.get("HYPOTHESIS_PROFILE", "repeatable"))
