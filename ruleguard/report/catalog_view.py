"""The table printed by ``ruleguard rules``: every rule and its severity in a ruleset."""

from __future__ import annotations

import io


def render_rules_table(ruleset, *, color: bool = False) -> str:
    """Rule id, family, severity in ``ruleset`` (default severity when unset), summary."""
    from rich.console import Console
    from rich.table import Table

    from ruleguard.rules.catalog import RULES

    table = Table(title=f"rules in ruleset {getattr(ruleset, 'name', '')}".rstrip(), expand=False)
    table.add_column("rule")
    table.add_column("severity")
    table.add_column("summary", overflow="fold")
    for rule_id, spec in sorted(RULES.items()):
        table.add_row(rule_id, ruleset.severity_of(rule_id).value, spec.summary)
    buffer = io.StringIO()
    Console(file=buffer, force_terminal=color, no_color=not color, width=120).print(table)
    return buffer.getvalue()
