"""Shared test configuration.

Under CI (``CI`` set) hypothesis draws the same examples every run: a landing must
not depend on the luck of a random draw. Locally the draws are random, which is how
the property tests found the bugs they pin down now; run with ``CI=1`` to get CI's.
"""

import os

from hypothesis import settings

settings.register_profile("ci", derandomize=True, print_blob=True)
if os.environ.get("CI"):
    settings.load_profile("ci")
