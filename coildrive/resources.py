"""Where the bundled boards, templates and examples live.

In a wheel they are copied into ``coildrive/_data/`` (see pyproject.toml); in a source
checkout or an editable install they are the top-level folders of the repository.
"""

from __future__ import annotations

from pathlib import Path

_PACKAGE = Path(__file__).resolve().parent


def data_dir(name: str) -> Path:
    """Folder of bundled data: ``"boards"``, ``"codegen_templates"`` or ``"examples"``."""
    installed = _PACKAGE / "_data" / name
    if installed.is_dir():
        return installed
    return _PACKAGE.parent / name


def bundled_boards() -> dict[str, Path]:
    """Bundled board profiles by name (file stem), sorted."""
    return {p.stem: p for p in sorted(data_dir("boards").glob("*.toml"))}


def example(name: str) -> Path:
    """Path of a bundled example drive file, e.g. ``example("demo-valve")``."""
    return data_dir("examples") / f"{name}.toml"
