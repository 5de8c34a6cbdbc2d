"""seamline: cutoff-design (regression discontinuity) analysis for notebooks.

>>> import seamline
>>> design = seamline.Design(data, score="income_index", cutoff=0.0, outcome="y")  # doctest: +SKIP
>>> design.fit()                                                                  # doctest: +SKIP
"""
from .estimate.design import Design
from .results.fit import Fit

__version__ = "0.1.0"
__all__ = ["Design", "Fit", "__version__"]
