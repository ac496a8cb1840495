"""Suite-wide settings: property tests explore fresh cases on a developer's machine and replay a fixed set on CI.

A case a search finds is added to its test as an ``@example`` (with what it showed), so it is checked on every
run from then on; CI sets ``CI`` so that a red run always means a change, never the luck of the draw.
"""

from __future__ import annotations

import os

from hypothesis import settings

settings.register_profile("ci", derandomize=True, print_blob=True)
if os.environ.get("CI"):
    settings.load_profile("ci")
