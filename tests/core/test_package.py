"""The package's public names: re-exports never shadow the core's submodules."""

from __future__ import annotations

import importlib
import inspect

import truthsieve


def test_core_submodules_are_modules_not_functions_of_the_same_name():
    import truthsieve.core as core

    for name in ("draw", "incentives", "labels", "rules", "mechanisms"):
        assert inspect.ismodule(getattr(core, name, importlib.import_module(f"truthsieve.core.{name}"))), name
    assert inspect.ismodule(importlib.import_module("truthsieve.core.draw"))


def test_every_public_name_of_the_package_resolves():
    for name in truthsieve.__all__:
        assert getattr(truthsieve, name) is not None, name
    assert callable(truthsieve.draw) and callable(truthsieve.incentives)
    assert truthsieve.draw is importlib.import_module("truthsieve.core.draw").draw
