"""Shared pytest configuration: markers, hypothesis profile and a command-line runner."""

from __future__ import annotations

import pytest
from hypothesis import HealthCheck, settings

# No timed tests: hypothesis must not fail an example for being slow.
settings.register_profile(
    "retol",
    deadline=None,
    database=None,  # write nothing into the working tree
    max_examples=60,
    suppress_health_check=[HealthCheck.too_slow],
)
# a long fuzzing run: pytest tests/test_spec_fuzz.py --hypothesis-profile=soak
settings.register_profile("soak", parent=settings.get_profile("retol"), max_examples=20_000)
settings.load_profile("retol")


def pytest_configure(config):
    config.addinivalue_line(
        "markers", "slow: slow test (opt-in through an environment variable; see the test)"
    )


@pytest.fixture
def invoke():
    """Run the ``retol`` command line in-process: ``invoke("plate", "--json", ...)``.

    Returns click's ``Result`` (``exit_code``, ``stdout``, ``stderr``, ``output``).
    """
    from click.testing import CliRunner

    from tolerance.cli.main import cli

    runner = CliRunner()

    def run(*args):
        return runner.invoke(cli, [str(a) for a in args], catch_exceptions=True)

    return run
