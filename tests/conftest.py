"""Shared test configuration.

Under CI (``CI=true``) hypothesis runs derandomised, so a run is repeatable on a
fresh machine with an empty example database.
"""

from __future__ import annotations

import os

from hypothesis import settings

settings.register_profile("ci", derandomize=True, deadline=None, print_blob=True)
settings.register_profile("dev", deadline=None)
settings.load_profile("ci" if os.environ.get("CI", "").lower() == "true" else "dev")
