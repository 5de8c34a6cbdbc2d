"""Fixtures shared by the notebook-layer tests."""
from __future__ import annotations

import pytest
from IPython.testing import globalipapp


@pytest.fixture(scope="module")
def ip():
    """A real IPython shell (the machinery a notebook kernel uses) with ``%load_ext seamline`` run."""
    globalipapp.start_ipython()
    shell = globalipapp.get_ipython()
    shell.run_cell("%load_ext seamline", store_history=False)
    return shell
