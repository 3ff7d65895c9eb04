"""The classical formulas the tool checks itself against (pure: no import of fluid, desim or
the other rooms of compare).

Erlang B, C and A (:mod:`.erlang`), Cobham's non-preemptive priority waits (:mod:`.priority`),
Whitt's (2006) fluid model of a many-server queue with abandonment (:mod:`.whitt`), and
square-root and Erlang-based staffing (:mod:`.staffing`). Each function names its publication.
"""
