"""Channel weights as FIR filters: design and a time-domain check (files: :mod:`arrayplan.formats.filter_set`)."""

from .check import FilterCheck, check_filters, end_to_end_responses, plot_crosstalk
from .design import FilterSet, band_window, design_filters, minimum_taps, validate_request
from ..formats.filter_set import write_filter_set as write_filters

__all__ = ["FilterCheck", "FilterSet", "band_window", "check_filters", "design_filters", "end_to_end_responses",
           "minimum_taps", "plot_crosstalk", "validate_request", "write_filters"]
