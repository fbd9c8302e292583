"""Fixtures of the JupyterLab browser tests: one server and one page per test module."""

import pytest
from _lab import open_browser, start_lab


@pytest.fixture(scope="module")
def lab(tmp_path_factory):
    """A JupyterLab server on a free loopback port with every Jupyter dir isolated."""
    with start_lab(tmp_path_factory.mktemp("lab")) as served:
        yield served


@pytest.fixture(scope="module")
def page(lab, tmp_path_factory):
    """One headless Chromium page (fresh profile) for the module, console captured."""
    with open_browser(tmp_path_factory.mktemp("profile")) as pg:
        yield pg
