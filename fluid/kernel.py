"""The step loop of the fluid dynamics on flat arrays, compiled with numba when it is installed.

:mod:`fluid.counters` turns a scenario into the tables below and calls :func:`run`; this module
knows nothing of scenarios. Every quantity is a *row* of one array ``Z[row, pad + k]`` (value at
grid time ``t_k``; the ``pad`` columns before ``k = 0`` hold zeros), of four kinds:

* **transition rows** (the counter equations of design.md §4.1): at each step, in evaluation
  order, ``Z[q] = max(Z[q] at k-1, min over specs s of scale_s * (base_s[k] + sum of
  coef * Z[row, pad + k + off]))``; with a same-time cycle, Gauss-Seidel sweeps from an upper
  bound (the job specs) until nothing changes;
* **linear rows**, evaluated after the transitions: ``base[k] + sum of coef * Z[row, pad + k +
  off]`` (what has entered a place, what has become available in it);
* **hold rows** (a place whose holding time is a distribution, not a fixed delay), evaluated
  before the transitions: the amount that has finished its hold by ``t_k``,
  ``sum over j < k of dIn[j] * G[k - j]`` for the place's inflow row ``In``, with
  ``G[i] = CDF((i + 1/2) dt)``: a job that finishes during a step is released at its end, so
  the midpoint keeps the mean hold exact to O(dt^2) (``G[i] = CDF(i dt)`` would add half a step
  to every hold). Exponential holds by the exact two-term recursion of that sum, others by a
  convolution over the support of G on the grid;
* **abandonment rows** (a waiting place with patience), evaluated before the transitions: the
  amount that has abandoned by ``t_k``. The waiting content is kept by age in cohorts (one per
  step of becoming available), served oldest first, each cohort surviving with the patience
  survival function F^c at its age (the age-structured fluid of Liu and Whitt 2012). A cohort
  that becomes available during step j is taken to have done so uniformly over the step, so at
  ``t_k`` its age is ``(k - j + 1/2) dt`` (the midpoint rule: the stationary queue is exact to
  O(dt^2)).

The same Python function runs compiled (``numba.njit``, bit-identical arithmetic: no fast-math)
or, where numba is missing, as plain Python (correct but slow).
"""

from __future__ import annotations

import math

__all__ = ["run", "COMPILED"]

MAX_SWEEPS = 50


def _run(n, pad, Z, base,
         # transitions
         order, grp_row, grp_spec, spec_base, spec_scale, spec_term, term_row, term_coef,
         term_off, cyclic, job_order, job_spec,
         # linear rows (after the transitions)
         lin_row, lin_spec,
         # hold rows (before the transitions)
         hold_row, hold_in, hold_kind, hold_rate, hold_first, hold_ptr, hold_cdf,
         # abandonment rows (before the transitions) and their cohorts
         ab_row, ab_avail, ab_out_ptr, ab_out_row, ab_out_coef, ab_ptr, ab_surv,
         coh_amt, coh_step, coh_head, coh_len, hol_age):
    """The step loop (see the module docstring). Returns the number of steps whose same-time
    sweeps hit the cap. ``hol_age[a, k]`` receives, for abandonment row a, the age in steps of
    the oldest cohort still waiting after service at ``t_k`` (-1 when none waits)."""
    unconverged = 0
    n_ab = ab_row.shape[0]
    cap = coh_amt.shape[1]
    for k in range(n):
        kk = k + pad
        # --- holds: what has finished by t_k, from inflows up to t_{k-1} ---------------------
        for h in range(hold_row.shape[0]):
            r = hold_row[h]
            src = hold_in[h]
            if hold_kind[h] == 0:  # exponential: the exact recursion of the table G below
                prev = Z[r, kk - 1]
                older = Z[src, kk - 2]
                Z[r, kk] = (prev + (Z[src, kk - 1] - older) * hold_first[h]
                            + (older - prev) * hold_rate[h])
            else:  # convolution with the hold's CDF on the grid, G[0] = 0, G = 1 past the table
                lo = hold_ptr[h]
                length = hold_ptr[h + 1] - lo
                back = k - length
                total = Z[src, back + pad] if back + pad >= 0 else 0.0
                for i in range(1, length):
                    j = kk - i
                    if j < 1:
                        break
                    total += (Z[src, j] - Z[src, j - 1]) * hold_cdf[lo + i]
                Z[r, kk] = total
        # --- abandonment during (t_{k-1}, t_k]: cohorts age, and a share abandons -----------
        for a in range(n_ab):
            r = ab_row[a]
            lost = 0.0
            lo = ab_ptr[a]
            length = ab_ptr[a + 1] - lo
            i = coh_head[a]
            for _ in range(coh_len[a]):
                slot = i % cap
                age = k - 1 - coh_step[a, slot]  # age index at t_{k-1}
                amt = coh_amt[a, slot]
                if amt > 0.0:
                    s0 = ab_surv[lo + age] if age < length else 0.0
                    s1 = ab_surv[lo + age + 1] if age + 1 < length else 0.0
                    keep = amt * (s1 / s0) if s0 > 0.0 else 0.0
                    lost += amt - keep
                    coh_amt[a, slot] = keep
                i += 1
            Z[r, kk] = Z[r, kk - 1] + lost
        # --- transitions ---------------------------------------------------------------------
        if not cyclic:
            for g in order:
                best = math.inf
                for s in range(grp_spec[g], grp_spec[g + 1]):
                    b = spec_base[s]
                    v = base[b, k] if b >= 0 else 0.0
                    for t in range(spec_term[s], spec_term[s + 1]):
                        v += term_coef[t] * Z[term_row[t], kk + term_off[t]]
                    v = v * spec_scale[s]
                    if v < best:
                        best = v
                zq = grp_row[g]
                prev = Z[zq, kk - 1]
                Z[zq, kk] = best if best > prev else prev
        else:
            for g in job_order:
                s = job_spec[g]
                b = spec_base[s]
                v = base[b, k] if b >= 0 else 0.0
                for t in range(spec_term[s], spec_term[s + 1]):
                    v += term_coef[t] * Z[term_row[t], kk + term_off[t]]
                v = v * spec_scale[s]
                zq = grp_row[g]
                prev = Z[zq, kk - 1]
                Z[zq, kk] = v if v > prev else prev
            done = False
            for _ in range(MAX_SWEEPS):
                changed = False
                for g in order:
                    best = math.inf
                    for s in range(grp_spec[g], grp_spec[g + 1]):
                        b = spec_base[s]
                        v = base[b, k] if b >= 0 else 0.0
                        for t in range(spec_term[s], spec_term[s + 1]):
                            v += term_coef[t] * Z[term_row[t], kk + term_off[t]]
                        v = v * spec_scale[s]
                        if v < best:
                            best = v
                    zq = grp_row[g]
                    prev = Z[zq, kk - 1]
                    new = best if best > prev else prev
                    old = Z[zq, kk]
                    if abs(new - old) > 1e-12 * (1.0 + abs(old)):
                        changed = True
                    Z[zq, kk] = new
                if not changed:
                    done = True
                    break
            if not done:
                unconverged += 1
        # --- linear rows ---------------------------------------------------------------------
        for m in range(lin_row.shape[0]):
            s = lin_spec[m]
            b = spec_base[s]
            v = base[b, k] if b >= 0 else 0.0
            for t in range(spec_term[s], spec_term[s + 1]):
                v += term_coef[t] * Z[term_row[t], kk + term_off[t]]
            Z[lin_row[m], kk] = v
        # --- cohorts: the new one joins, service takes the oldest first ----------------------
        for a in range(n_ab):
            av = ab_avail[a]
            new = Z[av, kk] - Z[av, kk - 1]
            if new > 0.0:
                if coh_len[a] == cap:  # the ring is full: fold the oldest into the next
                    h0 = coh_head[a] % cap
                    h1 = (coh_head[a] + 1) % cap
                    coh_amt[a, h1] += coh_amt[a, h0]
                    coh_head[a] += 1
                    coh_len[a] -= 1
                slot = (coh_head[a] + coh_len[a]) % cap
                coh_amt[a, slot] = new
                coh_step[a, slot] = k
                coh_len[a] += 1
            served = 0.0
            for t in range(ab_out_ptr[a], ab_out_ptr[a + 1]):
                served += ab_out_coef[t] * (Z[ab_out_row[t], kk] - Z[ab_out_row[t], kk - 1])
            while served > 0.0 and coh_len[a] > 0:
                slot = coh_head[a] % cap
                amt = coh_amt[a, slot]
                if amt > served:
                    coh_amt[a, slot] = amt - served
                    served = 0.0
                else:
                    served -= amt
                    coh_amt[a, slot] = 0.0
                    coh_head[a] += 1
                    coh_len[a] -= 1
            # drop emptied cohorts at the head; the newest has waited half a step already
            while coh_len[a] > 0 and coh_amt[a, coh_head[a] % cap] <= 0.0:
                coh_head[a] += 1
                coh_len[a] -= 1
            hol_age[a, k] = k - coh_step[a, coh_head[a] % cap] if coh_len[a] > 0 else -1
    return unconverged


try:  # compiled when numba is there; the same function otherwise
    import numba as _numba

    run = _numba.njit(cache=True, nogil=True)(_run)
    COMPILED = True
except ImportError:  # pragma: no cover - exercised where numba is missing
    run = _run
    COMPILED = False
