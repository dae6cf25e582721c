"""Parsing of option text shared by ``%eda`` and ``python -m nbeda`` (one set of rules, one wording)."""

from __future__ import annotations

from typing import Any

import pandas as pd

from nbeda._context import ROLES

__all__ = ["OptionError", "resolve_column", "parse_roles", "report_options"]


class OptionError(ValueError):
    """Bad option text; the magic turns it into ``UsageError``, the CLI into exit code 2."""


def resolve_column(frame: pd.DataFrame, name: str, what: str = "") -> Any:
    """The column label the user meant: exact label first, else the one label whose ``str`` matches."""
    if name in frame.columns:
        return name
    matches = [c for c in frame.columns if str(c) == name]
    if len(matches) == 1:
        return matches[0]
    shown = ", ".join(map(str, list(frame.columns)[:30])) + (" …" if frame.shape[1] > 30 else "")
    prefix = f"{what}: " if what else ""
    raise OptionError(f"{prefix}unknown column {name!r}; columns are: {shown}")


def parse_roles(text: str | None, frame: pd.DataFrame) -> dict[Any, str]:
    """``"col=role,col2=role"`` → ``{col: role}`` with columns and roles checked."""
    out: dict[Any, str] = {}
    for part in (text or "").split(","):
        if not part.strip():
            continue
        if "=" not in part:
            raise OptionError(f"--roles expects column=role pairs, got {part.strip()!r}")
        col, role = part.rsplit("=", 1)
        role = role.strip().lower()
        if role not in ROLES:
            raise OptionError(f"--roles: unknown role {role!r} for {col.strip()!r}; roles are: {', '.join(ROLES)}")
        out[resolve_column(frame, col.strip(), "--roles")] = role
    return out


def report_options(frame: pd.DataFrame, args: Any) -> dict[str, Any]:
    """The Report keyword options from parsed ``--by --target --roles --sample --confidence --seed``."""
    return {
        "roles": parse_roles(args.roles, frame),
        "by": resolve_column(frame, args.by, "--by") if args.by else None,
        "target": resolve_column(frame, args.target, "--target") if args.target else None,
        "sample": args.sample,
        "confidence": args.confidence,
        "seed": args.seed,
    }
