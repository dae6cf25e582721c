"""Roles section: the table of column roles, a chart of role counts, and its code."""

from __future__ import annotations

from typing import Any

import pandas as pd

from nbeda._context import ROLES, Context
from nbeda.sections._base import SectionResult
from nbeda.stats.roles import roles_code

__all__ = ["RolesResult", "build"]


class RolesResult(SectionResult):
    name = "roles"
    title = "Roles"

    def chart(self) -> Any:
        import altair as alt

        counts = self.table["role"].value_counts().reindex(list(ROLES), fill_value=0)
        data = pd.DataFrame({"role": list(counts.index), "columns": counts.to_numpy()})
        data = data[data["columns"] > 0]
        return (
            alt.Chart(data, title="Columns per role")
            .mark_bar()
            .encode(
                y=alt.Y("role:N", sort=list(ROLES), title=None),
                x=alt.X("columns:Q", title="columns"),
                tooltip=["role", "columns"],
            )
            .properties(width=320, height=max(40, 22 * len(data)))
        )

    def code(self, frame_name: str = "df") -> str:
        return roles_code(self.ctx, frame_name)


def build(ctx: Context, **_: Any) -> RolesResult:
    table = ctx.roles_table
    notes = [
        "Roles are inferred by documented rules (see the reason column); override any with "
        "roles={'column': 'role'} or %eda df --roles column=role.",
    ]
    flags = []
    for role, word in (("constant", "constant"), ("empty", "entirely missing")):
        cols = [str(c) for c in table.index[table["role"] == role]]
        if cols:
            flags.append(f"{len(cols)} {word} column(s): {', '.join(cols[:10])}")
    return RolesResult(ctx, table, notes=notes, flags=flags)
