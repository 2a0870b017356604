"""Figures (matplotlib).  Every function takes ``ax=None`` (or ``fig=None``) and returns the figure.

* :func:`plot_rig` — the rig in three views (top, side, front).
* :func:`plot_couplings` — each channel's power coupling as % of the sum rule, linear and dB.
* :func:`plot_channel_counts` — strong, usable and effective channels against frequency.
* :func:`plot_field` — pressure magnitude of one channel over a plane.
"""

from .channels import plot_channel_counts, plot_couplings
from .field import plot_field
from .rig import plot_rig
from .verify import plot_crosstalk, plot_singular_values

__all__ = ["plot_rig", "plot_couplings", "plot_channel_counts", "plot_field", "plot_crosstalk",
           "plot_singular_values"]
