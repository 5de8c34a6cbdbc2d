"""A small fixed table used by the export snapshot tests (invented numbers)."""
from __future__ import annotations

import pytest

from seamline.export import TableModel


@pytest.fixture
def small_model() -> TableModel:
    return TableModel(
        title="Invented estimates: tutoring & 50% take-up",
        columns=("Estimator", "Estimate", "Std. error", "N used", "95% interval"),
        rows=(
            ("Conventional", 3.14159265, 0.5, 1234, (2.1, 4.2)),
            ("Robust_bias-corrected", -2.71828, None, 987, (-3.0, -0.00001)),
        ),
        decimals=(0, 3, 3, 0, 2),
        notes=("Invented numbers.", "Bandwidth h = 5 ($ units)."),
        label="tab:invented",
    )
