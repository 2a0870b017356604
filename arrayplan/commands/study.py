"""``arrayplan study``: design studies of a plan or rig, one sub-command per study module.

Design studies of a plan or rig. Each writes tables, a JSON sidecar and figures to its --out folder.

Each module listed in :data:`STUDY_MODULES` defines ``register(actions)``,
which adds its parser to the ``study`` sub-commands and sets ``run=...``.
"""

from __future__ import annotations

import argparse
import importlib

from ._args import add_command_group

#: Study command modules, in the order ``arrayplan study --help`` lists them.
STUDY_MODULES: tuple[str, ...] = (
    "arrayplan.commands.study_capacity",
    "arrayplan.commands.study_tolerance",
    "arrayplan.commands.study_zones",
    "arrayplan.commands.study_layout",
)


def register(sub: argparse._SubParsersAction) -> None:
    actions = add_command_group(sub, "study", __doc__, dest="study_action", metavar="STUDY")
    for name in STUDY_MODULES:
        importlib.import_module(name).register(actions)
