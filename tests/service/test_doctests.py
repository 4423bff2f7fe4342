"""The examples in the service's docstrings run (the service folder is outside testpaths)."""

from __future__ import annotations

import doctest
import importlib

import pytest


@pytest.mark.parametrize("name", ["service.settings", "service.builtin", "service.routes",
                                  "service.cluster", "service.ratelimit"])
def test_docstring_examples(name: str) -> None:
    result = doctest.testmod(importlib.import_module(name))
    assert result.attempted > 0 and result.failed == 0
