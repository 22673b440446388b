"""Settings shared by the whole suite.

Property tests (hypothesis): on CI (``CI`` set) the examples are drawn from a fixed seed, so a
run is reproducible and a red CI names an example that fails again locally with ``CI=1``;
elsewhere every run explores new examples (and hypothesis keeps the failing ones it found in
.hypothesis/, which git ignores).
"""

from __future__ import annotations

import os

from hypothesis import settings

settings.register_profile("ci", derandomize=True, database=None, print_blob=True)
if os.environ.get("CI"):
    settings.load_profile("ci")
