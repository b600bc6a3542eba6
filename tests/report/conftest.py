import pytest

from riskbench.report.render_check import chromium_or_reason


@pytest.fixture(scope="session")
def chromium() -> str:
    """Debian's chromium, installed when missing if possible; otherwise the test is skipped with the reason."""
    path, reason = chromium_or_reason(install=True)
    if path is None:
        pytest.skip(f"headless browser check skipped: {reason}")
    return path
