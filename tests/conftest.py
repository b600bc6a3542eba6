"""Settings shared by every test folder.

Property tests draw their examples at random on a developer's machine (new cases each run) and from a fixed
sequence under CI (environment variable ``CI`` set), so that a CI run can be repeated exactly.
"""

import os

from hypothesis import settings

settings.register_profile("ci", derandomize=True)
if os.environ.get("CI"):
    settings.load_profile("ci")
