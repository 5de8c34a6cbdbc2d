"""seamline: cutoff-design (regression discontinuity) analysis for notebooks.

>>> import seamline
>>> design = seamline.Design(data, score="income_index", cutoff=0.0, outcome="y")  # doctest: +SKIP
>>> design.fit()                                                                  # doctest: +SKIP
"""
from .estimate.design import Design
from .export.paper import paper_table
from .export.paper_session import paper_tables
from .results.fit import Fit

try:  # the version is written once, in extension/package.json, and reaches us through the package metadata
    from importlib.metadata import PackageNotFoundError, version as _version
    __version__ = _version("seamline")
except PackageNotFoundError:  # pragma: no cover - running from a source tree that was never installed
    __version__ = "0+unknown"
__all__ = ["Design", "Fit", "__version__", "board", "load_ipython_extension", "paper_table", "paper_tables"]


def load_ipython_extension(ip) -> None:
    """``%load_ext seamline``: register the ``%%cutoff`` cell magic (widgets and charts load later)."""
    from .notebook.magic import load_ipython_extension as load

    load(ip)


def __getattr__(name: str):
    # ``seamline.board`` lives in the notebook layer; import it on first use so that
    # ``import seamline`` stays free of IPython, ipywidgets and Altair.
    if name == "board":
        from .notebook.board import board

        return board
    raise AttributeError(f"module 'seamline' has no attribute '{name}'")


def _jupyter_labextension_paths() -> list[dict[str, str]]:
    """Where the prebuilt JupyterLab extension lives (read by ``jupyter labextension develop``)."""
    return [{"src": "labextension", "dest": "seamline"}]
