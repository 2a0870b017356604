"""Figures (matplotlib).  Every function takes ``ax=None`` (or ``fig=None``) and returns the figure.

* :func:`plot_rig` — the rig in three views (top, side, front).
* :func:`plot_couplings` — each channel's power coupling as % of the sum rule, linear and dB.
* :func:`plot_channel_counts` — strong, usable and effective channels against frequency.
* :func:`plot_level_map` — frequency x channel heat map of levels, strong count and estimate.
* :func:`plot_field` — pressure magnitude of one channel over a plane;
  :func:`plot_field_panels` — several channels side by side.
* :func:`plot_ir_overview` — envelopes and peak levels of an impulse-response set.
* :func:`plot_crosstalk`, :func:`plot_singular_values`, :func:`plot_isolation` — verification.
"""

from .channels import plot_channel_counts, plot_couplings
from .field import plot_field, plot_field_panels
from .irs import plot_ir_overview
from .levels import plot_level_map
from .rig import plot_rig
from .verify import plot_channel_matrices, plot_crosstalk, plot_isolation, plot_singular_values

__all__ = ["plot_rig", "plot_couplings", "plot_channel_counts", "plot_level_map", "plot_field",
           "plot_field_panels", "plot_ir_overview", "plot_crosstalk", "plot_channel_matrices",
           "plot_singular_values", "plot_isolation"]
