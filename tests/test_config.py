"""prep.config: typed configs from YAML with key paths and line numbers in every error."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

import pytest
from ruamel.yaml import YAML

from prep.config import ConfigError, ConfigValueError, build


@dataclass(frozen=True)
class Fill:
    fill: str


@dataclass(frozen=True)
class Example:
    threshold: float = 0.8
    mode: Literal["first", "latest"] = "first"
    columns: list[str] | None = None
    policies: dict[str, Literal["keep", "set_aside"] | Fill] | None = None
    seed: int = 0

    def check(self) -> None:
        if not 0 <= self.threshold <= 1:
            raise ConfigValueError("threshold", "must be between 0 and 1")


def load(text: str):
    return YAML(typ="rt", pure=True).load(text)


def test_defaults_and_values():
    result = build(Example, load("threshold: 0.9\ncolumns: [a, b]\npolicies: {x: keep, y: {fill: z}}\n"), "step")
    assert result == Example(threshold=0.9, columns=["a", "b"], policies={"x": "keep", "y": Fill("z")})
    assert build(Example, None, "step") == Example()


@pytest.mark.parametrize(
    ("text", "path", "line", "fragment"),
    [
        ("threshold: 0.9\nthreshhold: 1\n", "step.threshhold", 2, "unknown key"),
        ("mode: middle\n", "step.mode", 1, "one of 'first', 'latest'"),
        ("seed: 1.5\n", "step.seed", 1, "whole number"),
        ("seed: true\n", "step.seed", 1, "whole number"),
        ("columns: a\n", "step.columns", 1, "a list"),
        ("columns:\n  - a\n  - 3\n", "step.columns[1]", 3, "a string"),
        ("policies:\n  x: drop\n", "step.policies.x", 2, "expected"),
        ("threshold: 2\n", "step.threshold", 1, "between 0 and 1"),
    ],
)
def test_errors_name_key_path_and_line(text, path, line, fragment):
    with pytest.raises(ConfigError) as info:
        build(Example, load(text), "step")
    assert info.value.path == path
    assert info.value.line == line
    assert fragment in info.value.message
