"""docs/architecture.md against the code: every signature it quotes, every module it names.

Ground truth: ``inspect.signature`` of the objects themselves (parameter names, order, which
are keyword-only, defaults, the return annotation as written) and the files of the tree.
"""

from __future__ import annotations

import importlib
import inspect
import re
from pathlib import Path
from types import ModuleType
from typing import Any

import numpy as np
import pytest

REPO = Path(__file__).resolve().parent.parent
DOC = (REPO / "docs" / "architecture.md").read_text(encoding="utf-8")
SIGNATURE = re.compile(r"`(planner(?:\.\w+)+)\(([^`]*)\)(?: -> ([^`]+))?`")
QUOTED = SIGNATURE.findall(DOC)


def _resolve(dotted: str) -> tuple[ModuleType, Any]:
    """The module holding ``dotted`` and the object (function, class or method) it names."""
    parts = dotted.split(".")
    for cut in range(len(parts) - 1, 0, -1):
        try:
            module = importlib.import_module(".".join(parts[:cut]))
        except ModuleNotFoundError:
            continue
        obj: Any = module
        for name in parts[cut:]:
            obj = getattr(obj, name)
        return module, obj
    raise AssertionError(f"{dotted} names no module")


def _split(params: str) -> list[str]:
    out, depth, word = [], 0, ""
    for ch in params:
        depth += ch in "([{"
        depth -= ch in ")]}"
        if ch == "," and depth == 0:
            out.append(word.strip())
            word = ""
        else:
            word += ch
    return [w for w in [*out, word.strip()] if w]


def _same(a: Any, b: Any) -> bool:
    if isinstance(a, np.ndarray) or isinstance(b, np.ndarray):
        return bool(np.array_equal(a, b))
    return bool(a == b)


def test_the_page_quotes_the_stage_signatures() -> None:
    # Ground truth: the contract list of the page; at least one signature per stage paragraph.
    assert len(QUOTED) >= 60
    for name in ("score_cues", "plan_events", "make_plan", "render", "verify", "run_triage", "load_plan"):
        assert any(dotted.endswith("." + name) for dotted, _, _ in QUOTED), name


@pytest.mark.parametrize(("dotted", "params", "returns"), QUOTED, ids=[q[0].removeprefix("planner.") for q in QUOTED])
def test_quoted_signature_matches_the_code(dotted: str, params: str, returns: str) -> None:
    module, obj = _resolve(dotted)
    signature = inspect.signature(obj)
    actual = [p for p in signature.parameters.values() if p.name not in ("self", "cls")]
    keyword_only, quoted = False, []
    for word in _split(params):
        if word == "*":
            keyword_only = True
            continue
        name, _, default = word.partition("=")
        quoted.append((name, keyword_only, default))
    assert [q[0] for q in quoted] == [p.name for p in actual], f"{dotted}: parameters differ"
    for (name, kw_only, default), p in zip(quoted, actual, strict=True):
        assert kw_only == (p.kind is inspect.Parameter.KEYWORD_ONLY), f"{dotted}: {name} keyword-only differs"
        if default:
            assert _same(eval(default, vars(module)), p.default), f"{dotted}: default of {name} differs"  # noqa: S307
        else:
            assert p.default is inspect.Parameter.empty, f"{dotted}: {name} has a default the page omits"
    if returns:
        annotation = signature.return_annotation
        text = annotation if isinstance(annotation, str) else inspect.formatannotation(annotation)
        assert returns.replace(" ", "") == text.replace(" ", ""), f"{dotted}: returns {text}"


def test_every_module_the_page_names_exists() -> None:
    # Ground truth: the files of the tree.
    for path in sorted(set(re.findall(r"`(planner/[\w/]+(?:\.py)?)`", DOC))):
        assert (REPO / path).exists(), path
    for stage_module in re.findall(r"`(\w+\.py)`", DOC):
        assert list(REPO.joinpath("planner").rglob(stage_module)), stage_module
