"""The package's public names: re-exports never shadow the core's submodules."""

from __future__ import annotations

import importlib
import inspect

import truthsieve


def test_core_submodules_are_modules_not_functions_of_the_same_name():
    # Re-exporting ``draw`` from ``core/__init__`` would rebind the attribute
    # ``truthsieve.core.draw`` from the submodule to the function.
    import truthsieve.core as core

    for name in ("draw", "incentives", "labels", "rules", "mechanisms"):
        importlib.import_module(f"truthsieve.core.{name}")
        assert inspect.ismodule(getattr(core, name)), name


def test_every_public_name_of_the_package_resolves():
    for name in truthsieve.__all__:
        assert getattr(truthsieve, name) is not None, name
    assert callable(truthsieve.draw) and callable(truthsieve.incentives)
    assert truthsieve.draw is importlib.import_module("truthsieve.core.draw").draw
