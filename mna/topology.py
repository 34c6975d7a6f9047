"""Topology checks, run before any matrix is built.

- Every node must connect, through some element, to the reference of its
  domain (``gnd`` or ``frame``): an island is an error.
- Voltage sources (and speed sources and gears, which fix shaft speeds)
  must not form a loop: an error.
- A node group joined to the rest only through current sources, load
  torques and inductors, at least one of which forces its flow (a current
  source in series with an inductor, two current sources in series, a
  shaft driven by a machine with no inertia or friction) is an error.
  Inductors alone in series are fine.
- A node reached only through capacitors (or a shaft held only by an
  inertia) is not an error: it gets a tiny leak conductance for the DC
  operating point and a warning.
"""

from __future__ import annotations

from collections import defaultdict, deque
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

from .elements.base import CAPACITOR, CURRENT, GYRATOR, INDUCTOR, REFERENCE, VOLTAGE, Branch, Element
from .errors import TopologyError

if TYPE_CHECKING:  # pragma: no cover
    from .circuit import Circuit


class _Sets:
    """Union-find over node names."""

    def __init__(self, items):
        self.parent = {i: i for i in items}

    def find(self, a):
        root = a
        while self.parent[root] != root:
            root = self.parent[root]
        while self.parent[a] != root:
            self.parent[a], a = root, self.parent[a]
        return root

    def union(self, a, b) -> bool:
        ra, rb = self.find(a), self.find(b)
        if ra == rb:
            return False
        self.parent[ra] = rb
        return True


@dataclass
class TopologyReport:
    """What the checks found that is not an error."""

    dc_floating: list[str] = field(default_factory=list)  # nodes needing a DC leak
    warnings: list[str] = field(default_factory=list)


def _branches(circuit: "Circuit") -> list[tuple[Element, Branch]]:
    out = []
    for element in circuit.elements.values():
        for br in element.branches():
            out.append((element, br))
    return out


def check_topology(circuit: "Circuit") -> TopologyReport:
    """Raise :class:`~mna.errors.TopologyError` for an unsolvable connection."""
    nodes = list(circuit.nodes)
    refs = set(REFERENCE.values())
    branches = _branches(circuit)
    report = TopologyReport()

    # 1. Islands.
    every = _Sets(nodes)
    for _, br in branches:
        every.union(br.a, br.b)
    grounded = {every.find(r) for r in refs}
    islands: dict[str, list[str]] = defaultdict(list)
    for node in nodes:
        if node not in refs and every.find(node) not in grounded:
            islands[every.find(node)].append(node)
    if islands:
        group = sorted(islands.values(), key=len)[0]
        domain = circuit.nodes[group[0]]
        ref = REFERENCE.get(domain, "gnd")
        listed = ", ".join(repr(n) for n in sorted(group)[:6]) + (" ..." if len(group) > 6 else "")
        through = {"shaft": "an inertia, friction, a speed source...",
                   "thermal": "a thermal resistance, a temperature source..."}.get(domain, "a resistor, a source...")
        raise TopologyError(
            f"node{'s' if len(group) > 1 else ''} {listed} {'have' if len(group) > 1 else 'has'} "
            f"no connection to {ref!r}: the circuit is in separate pieces",
            circuit.node_spans.get(group[0]),
            hint=f"connect the group to {ref} through some element ({through})",
        )

    # 2. Loops of voltage sources.
    vsets = _Sets(nodes)
    vforest: dict[str, list[tuple[str, Element]]] = defaultdict(list)
    for element, br in branches:
        if br.role != VOLTAGE:
            continue
        if not vsets.union(br.a, br.b):
            path = _path(vforest, br.a, br.b)
            names = [element.name] + [e.name for e in path]
            if circuit.nodes.get(br.a) == "shaft":
                raise TopologyError(
                    f"{' and '.join(sorted(set(names)))} form a loop of speed constraints (speed sources, "
                    "gears): they fix the same shaft speed twice and the torques are undefined",
                    element.span,
                    hint="remove one speed source, or couple the shafts through friction instead",
                )
            raise TopologyError(
                f"{' and '.join(sorted(set(names)))} form a loop of voltage sources: "
                "their voltages fight and the currents are undefined",
                element.span,
                hint="put a resistance in the loop (a source's internal resistance), or remove one source",
            )
        vforest[br.a].append((br.b, element))
        vforest[br.b].append((br.a, element))

    # 3. Cut sets of forced flows (current sources, load torques, machine shafts) and inductors.
    cut = _Sets(nodes)
    for _, br in branches:
        if br.role not in (CURRENT, INDUCTOR, GYRATOR):
            cut.union(br.a, br.b)
    ref_roots = {cut.find(r) for r in refs}
    incident: dict[str, list[tuple[Element, Branch]]] = defaultdict(list)
    for element, br in branches:
        ra, rb = cut.find(br.a), cut.find(br.b)
        if ra != rb:
            incident[ra].append((element, br))
            incident[rb].append((element, br))
    for root, edges in incident.items():
        if root in ref_roots:
            continue
        forcing = [e for e, br in edges if br.role in (CURRENT, GYRATOR)]
        if not forcing:
            continue
        members = sorted(n for n in nodes if cut.find(n) == root)
        names = sorted({e.name for e, _ in edges})
        domain = circuit.nodes.get(members[0])
        if domain == "shaft":
            msg = (f"shaft node {members[0]!r} has nothing to hold it: only {', '.join(names)} act on it")
            hint = "give the shaft an inertia, friction or a speed source"
        elif domain == "thermal":
            msg = (f"thermal node {members[0]!r} has no path for its heat: only {', '.join(names)} act on it")
            hint = "connect it to the ambient through a thermal resistance, a Foster or Cauer ladder or a heatsink"
        else:
            msg = (f"{', '.join(names)} force{'s' if len(names) == 1 else ''} the current into node"
                   f"{'s' if len(members) > 1 else ''} {', '.join(repr(m) for m in members[:4])} "
                   "with no other path: a current source in series with an inductor or another current source")
            hint = "give the current another path (a resistor across the source, a clamp diode...)"
        raise TopologyError(msg, forcing[0].span, hint=hint)

    # 4. Nodes with no DC path to their reference: warn and leak.
    dc = _Sets(nodes)
    for _, br in branches:
        if br.role not in (CAPACITOR, CURRENT):
            dc.union(br.a, br.b)
    dc_ref = {dc.find(r) for r in refs}
    for node in nodes:
        if node not in refs and dc.find(node) not in dc_ref:
            report.dc_floating.append(node)
    if report.dc_floating:
        listed = ", ".join(repr(n) for n in report.dc_floating[:6])
        report.warnings.append(
            f"no DC path to the reference from {listed}: a 1e-12 S (or N*m*s/rad) leak fixes "
            "the operating point there"
        )
    return report


def _path(forest: dict[str, list[tuple[str, Element]]], a: str, b: str) -> list[Element]:
    """Elements on the path a -> b in a forest (breadth-first)."""
    prev: dict[str, tuple[str, Element] | None] = {a: None}
    queue = deque([a])
    while queue:
        n = queue.popleft()
        if n == b:
            break
        for m, e in forest.get(n, []):
            if m not in prev:
                prev[m] = (n, e)
                queue.append(m)
    out = []
    n = b
    while prev.get(n):
        n, e = prev[n]
        out.append(e)
    return out


def check_dc_loops(circuit: "Circuit") -> None:
    """Refuse a loop of ideal inductors (and voltage sources) before a DC operating point.

    At the operating point an inductor with no resistance of its own is a
    short circuit: a loop of them, or one across a voltage source, leaves the
    loop's current undetermined (a singular matrix). Raises
    :class:`~mna.errors.TopologyError` naming the loop, with the way out:
    start the run from rest, or give a winding its resistance.
    """
    sets = _Sets(list(circuit.nodes))
    forest: dict[str, list[tuple[str, Element]]] = defaultdict(list)
    for element, br in _branches(circuit):
        shorted = br.role == VOLTAGE or (br.role == INDUCTOR and not br.resistive)
        if not shorted or br.a == br.b:
            continue
        if not sets.union(br.a, br.b):
            loop = [element] + _path(forest, br.a, br.b)
            if not any(b.role == INDUCTOR for e in loop for b in e.branches()):
                continue  # voltage sources alone: reported by check_topology
            names = ", ".join(dict.fromkeys(e.name for e in loop))
            raise TopologyError(
                f"{names} form a loop with no resistance at the DC operating point (an inductor is a short "
                "circuit there), so the current around it is not determined",
                element.span,
                hint="start the transient run from rest (simulate transient ... start=rest, with initial= "
                     "currents if needed), or give a winding its resistance=")
        forest[br.a].append((br.b, element))
        forest[br.b].append((br.a, element))

