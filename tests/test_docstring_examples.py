"""The ``Examples`` sections of the renderer's docstrings run, and give what they show."""

from __future__ import annotations

import doctest
import importlib
import pkgutil

import pytest

import earfold.renderer

#: The main public functions, which must each carry an example that runs.
MUST_HAVE_EXAMPLES = (
    "earfold.renderer.render.render",
    "earfold.renderer.loudness.deliver",
    "earfold.renderer.hrtf.read_sofa",
    "earfold.renderer.engine.BinauralConvolver",
)


def _modules() -> list[str]:
    names = ["earfold.renderer"]
    for info in pkgutil.walk_packages(earfold.renderer.__path__, "earfold.renderer."):
        names.append(info.name)
    return sorted(names)


@pytest.mark.parametrize("name", _modules())
def test_examples_in_module_run(name: str, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)  # examples that write files write them here
    module = importlib.import_module(name)
    finder = doctest.DocTestFinder(exclude_empty=True)
    runner = doctest.DocTestRunner(optionflags=doctest.ELLIPSIS | doctest.NORMALIZE_WHITESPACE)
    for test in finder.find(module, name):
        if test.examples and test.name.startswith(name):
            runner.run(test)
    result = runner.summarize(verbose=False)
    assert result.failed == 0, f"{result.failed} example(s) in {name} failed (see the output above)"


@pytest.mark.parametrize("qualified", MUST_HAVE_EXAMPLES)
def test_main_public_functions_have_examples(qualified: str):
    module_name, _, attr = qualified.rpartition(".")
    obj = getattr(importlib.import_module(module_name), attr)
    tests = doctest.DocTestFinder(recurse=False).find(obj, attr)
    examples = sum(len(t.examples) for t in tests)
    if isinstance(obj, type) and not examples:  # a class: its methods' examples count too
        examples = sum(len(t.examples) for t in doctest.DocTestFinder().find(obj, attr))
    assert examples, f"{qualified} has no Examples section that doctest can run"
