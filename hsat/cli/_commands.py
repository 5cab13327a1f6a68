"""The list of commands; each command module owns its own options and output."""

from __future__ import annotations

import importlib

import click

# module name -> names of click commands defined in it
_MODULES: dict[str, tuple[str, ...]] = {}


def all_commands() -> list[click.Command]:
    commands: list[click.Command] = []
    for module_name, names in _MODULES.items():
        module = importlib.import_module(module_name)
        commands.extend(getattr(module, name) for name in names)
    return commands
