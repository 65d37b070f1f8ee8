"""Bundled trick templates: invented starting points for common tricks (core/data/tricks/*.yaml)."""
from __future__ import annotations

from importlib import resources
from pathlib import Path

from .robot import Robot
from .trick import Trick
from .trick_file import load_trick, save_trick


def _folder() -> Path:
    return Path(str(resources.files("kipup.core.data") / "tricks"))


def template_names() -> list[str]:
    """Names of the bundled templates, sorted."""
    return sorted(p.stem for p in _folder().glob("*.yaml"))


def template_path(name: str) -> Path:
    path = _folder() / f"{name}.yaml"
    if not path.is_file():
        raise KeyError(f"no template named {name!r}; templates: {', '.join(template_names())}")
    return path


def load_template(name: str) -> tuple[Trick, Robot]:
    """The template's trick and the (bundled) robot it uses."""
    return load_trick(template_path(name))


def write_template(name: str, path: str | Path) -> Path:
    """Write a template as a starting trick file at ``path`` (atomic); returns the path."""
    trick, _ = load_template(name)
    save_trick(trick, path)
    return Path(path)
