"""The list of commands; each command module owns its own options and output."""

from __future__ import annotations

import importlib

import click

# module name -> names of click commands defined in it
_MODULES: dict[str, tuple[str, ...]] = {
    "hsat.cli._check": ("check",),
    "hsat.cli._report": ("report", "sign", "amend", "verify"),
    "hsat.cli._analyze": ("analyze",),
    "hsat.cli._batch": ("batch", "registry", "export"),
    "hsat.cli._review": ("review", "rescore"),
}


def all_commands() -> list[click.Command]:
    commands: list[click.Command] = []
    for module_name, names in _MODULES.items():
        module = importlib.import_module(module_name)
        commands.extend(getattr(module, name) for name in names)
    return commands
