import pytest

from riskbench.report.render_check import require_chromium

# Debian's chromium, installed when missing if possible; otherwise the test is skipped with the reason.
chromium = pytest.fixture(name="chromium", scope="session")(lambda: require_chromium(install=True))
