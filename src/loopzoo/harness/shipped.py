"""The shipped config files (package ``loopzoo.conf``), read without importing Hydra."""

from __future__ import annotations

from importlib import resources

__all__ = ["CONFIG_MODULE", "shipped_options", "description"]

CONFIG_MODULE = "loopzoo.conf"


def shipped_options(group: str) -> list[str]:
    """Names of the files ``conf/<group>/*.yaml``, sorted: ``shipped_options("suite")``."""
    folder = resources.files(CONFIG_MODULE).joinpath(group)
    return sorted(p.name[: -len(".yaml")] for p in folder.iterdir() if p.name.endswith(".yaml"))


def description(group: str, name: str) -> str:
    """The first comment line of ``conf/<group>/<name>.yaml`` (its one-line description)."""
    text = resources.files(CONFIG_MODULE).joinpath(group, f"{name}.yaml").read_text("utf-8")
    comments = [line.lstrip("# ").strip() for line in text.splitlines()
                if line.startswith("#") and "@package" not in line]
    return comments[0] if comments else ""
