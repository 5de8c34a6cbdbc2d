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


@pytest.fixture
def close_new_boards():
    """Close the boards a test opened; boards open before it (a module fixture's) stay open.

    Not autouse: a file opts in with ``pytestmark = pytest.mark.usefixtures("close_new_boards")``.
    """
    from seamline.notebook.board import boards

    before = {id(b) for b in boards()}
    yield
    for b in boards():
        if id(b) not in before:
            b.close()
