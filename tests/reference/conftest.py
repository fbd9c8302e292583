"""Figures that statistical checks report are printed at the end of the run."""

import pytest

_FIGURES: list[str] = []


@pytest.fixture
def report():
    """Return a function that records a line to print in the terminal summary."""
    return _FIGURES.append


def pytest_terminal_summary(terminalreporter):
    if _FIGURES:
        terminalreporter.section("figures reported by statistical checks")
        for line in _FIGURES:
            terminalreporter.write_line(line)
