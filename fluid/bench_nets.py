"""Invented multi-skill nets of any size, for the fluid benchmark and the scaling tests.

``multi_skill_yaml(k, priorities=True)`` writes a contact centre with ``k`` call classes (all
numbers invented). Class i has its own arrivals (Poisson, or a 30-minute profile), a short
automated menu that ends 20 % of the calls, a queue with exponential patience and its own desk.

* With ``priorities``, a call waiting in queue i goes to its own desk first and overflows to a
  shared desk (priority at the queue). The shared desk serves the classes in a fixed order
  (priority at the pool). Its own-desk calls go through talk and then wrap-up, holding the agent
  throughout. There are 7 transitions per class.
* Without priorities, a routed share of 30 % of each queue goes to a common overflow queue that
  the shared desk serves. There are 6 transitions per class plus 2 for the shared desk. A net
  without priorities and with constant rates is one the throughput LP covers.

Holding times are multiples of 0.25 min, so the counters' grid divides them. Time unit: min.
"""

from __future__ import annotations

__all__ = ["multi_skill_yaml"]


def _rate(i: int) -> float:
    return 1.0 + 0.5 * (i % 5)


def multi_skill_yaml(k: int, *, priorities: bool = True, profile: bool = False,
                     horizon: float = 480.0) -> str:
    """YAML text of the invented ``k``-class multi-skill net (see the module docstring).
    ``profile``: class arrivals follow a 30-minute profile (a morning peak) instead of a
    constant rate."""
    if k < 1:
        raise ValueError(f"k must be at least 1 (got {k})")
    lines = [f"name: multi-skill centre, {k} classes (invented benchmark net)",
             "time_unit: min", f"run: {{horizon: {horizon:g}, warmup: 60, replications: 4, "
             "seed: 11}", "sources:"]
    for i in range(k):
        lam = _rate(i)
        if profile:
            shape = [0.6, 0.8, 1.0, 1.2, 1.4, 1.3, 1.1, 1.0, 0.9, 0.8, 0.7, 0.6]
            rates = ", ".join(f"{lam * f:g}" for f in shape)
            lines.append(f"  calls_{i}: {{profile: {{step: 30, rates: [{rates}]}}, "
                         f"into: menu_{i}}}")
        else:
            lines.append(f"  calls_{i}: {{rate: {lam:g}, into: menu_{i}}}")
    lines.append("pools:")
    total = 0.0
    for i in range(k):
        work = 0.8 * _rate(i) * 4.0  # calls reaching the queue x (talk 3 + wrap 1)
        total += work
        lines.append(f"  desk_{i}: {max(1, round(0.85 * work))}")
    shared = max(1, round(0.2 * total))
    if priorities:
        order = ", ".join(f"shared_answer_{i}" for i in range(k))
        lines.append(f"  shared: {{staff: {shared}, priority: [{order}]}}")
    else:
        lines.append(f"  shared: {shared}")
    lines.append("places:")
    for i in range(k):
        lines.append(f"  menu_{i}: {{hold: 0.5, route: {{menu_end_{i}: 0.2, "
                     f"menu_queue_{i}: 0.8}}}}")
        if priorities:
            lines.append(f"  queue_{i}: {{patience: {{dist: exponential, mean: 4.0}}, "
                         f"priority: [own_answer_{i}, shared_answer_{i}]}}")
        else:
            lines.append(f"  queue_{i}: {{patience: {{dist: exponential, mean: 4.0}}, "
                         f"route: {{own_answer_{i}: 0.7, overflow_{i}: 0.3}}}}")
        lines.append(f"  talk_{i}: {{hold: {{dist: gamma, mean: 3.0, cv: 0.7}}}}")
        if priorities:
            lines.append(f"  shared_talk_{i}: {{hold: {{dist: gamma, mean: 3.5, cv: 0.7}}}}")
        lines.append(f"  wrap_{i}: {{hold: 1.0}}")
    if not priorities:
        lines.append("  overflow_queue: {patience: {dist: exponential, mean: 4.0}}")
        lines.append("  shared_talk: {hold: {dist: gamma, mean: 3.5, cv: 0.7}}")
    lines.append("transitions:")
    for i in range(k):
        lines += [
            f"  menu_end_{i}: {{in: [menu_{i}], out: []}}",
            f"  menu_queue_{i}: {{in: [menu_{i}], out: [queue_{i}]}}",
            f"  own_answer_{i}: {{in: [queue_{i}, desk_{i}], out: [talk_{i}]}}",
            f"  talk_end_{i}: {{in: [talk_{i}], out: [wrap_{i}]}}",
            f"  wrap_end_{i}: {{in: [wrap_{i}], out: [desk_{i}]}}",
        ]
        if priorities:
            lines += [
                f"  shared_answer_{i}: {{in: [queue_{i}, shared], out: [shared_talk_{i}]}}",
                f"  shared_end_{i}: {{in: [shared_talk_{i}], out: [shared]}}",
            ]
        else:
            lines.append(f"  overflow_{i}: {{in: [queue_{i}], out: [overflow_queue]}}")
    if not priorities:
        lines += ["  shared_answer: {in: [overflow_queue, shared], out: [shared_talk]}",
                  "  shared_end: {in: [shared_talk], out: [shared]}"]
    return "\n".join(lines) + "\n"
