"""Channels: the SVD of every coupling matrix, and what is read from it.

``svd``
    :class:`ChannelSet` and :func:`decompose`: singular values, drive and
    combine weights per frequency, the phase convention and tracking across
    frequency.
``topk``
    The strongest few triplets of a large matrix without the full SVD.
``heuristics``
    The paraxial estimate of the number of well-coupled channels.
``planning``
    The whole planning step in one call: rig -> kernel -> channels -> counts.
``field``
    The pressure field one channel's drive weights produce over a plane.
"""

from .svd import *  # noqa: F401,F403
from .svd import __all__ as _svd_all

__all__ = list(_svd_all)
