"""Verification: how the planned channels and the filters that will really run hold up on measured responses.

``channels``
    Planned channels against a measured IR set (counts, levels, angles).
``filters``
    The FIR filters of a filter folder convolved with a measured IR set.
"""
