"""Readable tick labels on a logarithmic axis (hazard ratios): plain numbers, never overlapping powers of ten."""

from __future__ import annotations

import numpy as np
from matplotlib.axis import Axis
from matplotlib.ticker import FuncFormatter, LogLocator, NullFormatter

__all__ = ["readable_log_ticks"]


def readable_log_ticks(axis: Axis) -> None:
    """Plain numbers (0.5, 1, 2) on a log axis: powers of ten over more than three decades, 1-2-5 steps over
    one to three, finer steps over less,
    and unlabelled minor ticks (matplotlib labels minor ticks on a short log axis, and they overlap).

    Parameters
    ----------
    axis : the axis (``ax.xaxis`` or ``ax.yaxis``), already on a log scale with its final limits.
    """
    low, high = axis.get_view_interval()
    decades = np.log10(high / low)
    subs = (1.0,) if decades > 3 else (1.0, 2.0, 5.0) if decades > 1 else (1.0, 1.2, 1.5, 2.0, 3.0, 5.0, 7.0)
    axis.set_major_locator(LogLocator(base=10, subs=subs))
    axis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:g}"))
    axis.set_minor_formatter(NullFormatter())
