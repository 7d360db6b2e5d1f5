"""Export of the compiled graph: Graphviz dot, Mermaid, GraphML and JSON."""

from __future__ import annotations

import json
from typing import Any

FORMATS = ("dot", "mermaid", "graphml", "json")

_SHAPES = {"complaint": "doubleoctagon", "event": "box", "cause": "ellipse", "check": "diamond",
           "repair": "component", "caution": "note", "parameter": "plaintext"}


def _plain(g: Any) -> Any:
    """A copy whose attributes are all GraphML scalars (no None, no tuples)."""
    h = g.copy()
    for _, attrs in list(h.nodes(data=True)) + [(None, a) for *_, a in h.edges(data=True)]:
        for k, v in list(attrs.items()):
            if v is None:
                del attrs[k]
            elif isinstance(v, (list, tuple)):
                attrs[k] = ",".join(map(str, v))
    h.graph = {k: str(v) for k, v in h.graph.items() if v is not None}
    return h


def _quote(text: str) -> str:
    return '"' + str(text).replace("\\", "\\\\").replace('"', '\\"') + '"'


def to_dot(g: Any) -> str:
    lines = [f"digraph {_quote(g.graph.get('pack', 'pack'))} {{", "  rankdir=LR;"]
    for n, a in g.nodes(data=True):
        label = f"{a.get('title', n)}\\n[{n}]"
        lines.append(f"  {_quote(n)} [label={_quote(label)}, "
                     f"shape={_SHAPES.get(a.get('kind'), 'box')}];")
    for u, v, a in g.edges(data=True):
        lines.append(f"  {_quote(u)} -> {_quote(v)} [label={_quote(a.get('kind', ''))}];")
    lines.append("}")
    return "\n".join(lines) + "\n"


def to_mermaid(g: Any) -> str:
    ids = {n: f"n{i}" for i, n in enumerate(g.nodes)}
    lines = ["flowchart LR"]
    for n, a in g.nodes(data=True):
        title = str(a.get("title", n)).replace('"', "'")
        lines.append(f'  {ids[n]}["{title}<br/><small>{n}</small>"]')
    for u, v, a in g.edges(data=True):
        lines.append(f"  {ids[u]} -->|{a.get('kind', '')}| {ids[v]}")
    return "\n".join(lines) + "\n"


def to_graphml(g: Any) -> str:
    import networkx as nx

    return "\n".join(nx.generate_graphml(_plain(g))) + "\n"


def to_json(g: Any) -> str:
    import networkx as nx

    return json.dumps(nx.node_link_data(_plain(g), edges="edges"), indent=2) + "\n"


def export(g: Any, fmt: str) -> str:
    """The graph ``g`` as text in ``fmt`` (one of FORMATS)."""
    return {"dot": to_dot, "mermaid": to_mermaid, "graphml": to_graphml, "json": to_json}[fmt](g)
