"""Siting models on the sparse coverage relation.

``cover_all`` (LSCP), ``cover_most`` (MCLP), ``cover_target`` (least cost
for a coverage share), ``cover_twice`` (backup coverage) and ``tradeoff``
(people covered against number of sites).  Every function takes a
:class:`geocover.values.Reach` and returns a :class:`geocover.values.Plan`
(or a :class:`Tradeoff`) that carries its status, best bound and gap.
"""

from .backup import cover_twice
from .curve import Tradeoff, tradeoff
from .lscp import cover_all
from .mclp import cover_most
from .target import cover_target

__all__ = ["cover_all", "cover_most", "cover_target", "cover_twice", "tradeoff", "Tradeoff"]
