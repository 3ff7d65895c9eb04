"""Text and JSON of ``fluidgap fit``: the profile, the families fitted, the dispersion and the
day factor, and the report's tables and figures."""

from __future__ import annotations

import math

from .tables import format_table

__all__ = ["records_text", "counts_text", "records_report", "counts_report", "families_table"]


def _families(choice, what: str) -> str:
    rows = []
    best = choice.chosen
    for f in sorted(choice.fits, key=lambda f: f.aic):
        params = ", ".join(
            f"{k} {v:.4g}" + (f" [{f.intervals[k][0]:.4g}, {f.intervals[k][1]:.4g}]"
                              if k in f.intervals else "")
            for k, v in f.params.items())
        gof = f.statistic if f.p_value is None else f"{f.statistic:.3g} (p {f.p_value:.3g})"
        rows.append([("* " if f is best else "  ") + f.family, params, f.aic - best.aic, gof])
    stat = "KS" if best.p_value is not None else "gap to KM"
    return format_table(["family", "parameters (95 % Wald, log scale)", "dAIC", stat], rows,
                        title=f"{what} ({choice.observed} observed"
                        + (f", {choice.censored} censored" if choice.censored else "")
                        + "; * chosen by AIC)")


def families_table(choice):
    import pandas as pd

    rows = []
    for f in choice.fits:
        row = {"family": f.family, "chosen": f is choice.chosen, "aic": f.aic,
               "loglik": f.loglik, f.statistic_name: f.statistic, "p_value": f.p_value}
        for k, v in f.params.items():
            row[k] = v
            if k in f.intervals:
                row[f"{k}_low"], row[f"{k}_high"] = f.intervals[k]
        rows.append(row)
    return pd.DataFrame(rows)


def _profile_lines(fit) -> str:
    p = fit.profile
    from ..study.fit_input import clock

    rows = [[f"{clock(p.start + i * p.step, fit.time_unit, fit.stamped)}", int(n), r, lo, hi]
            for i, (n, r, lo, hi) in enumerate(zip(p.counts, p.rates, p.low, p.high))]
    return format_table(["from", "arrivals", "rate", "low", "high"], rows,
                        title=f"Arrival profile per {p.step:g} {fit.time_unit} over {p.days} "
                        f"day(s) (rate per {fit.time_unit}, 95 % Poisson interval)")


def records_text(fit, scenario_text: str | None, written: str | None) -> str:
    parts = [f"fluidgap fit: {fit.file}: {fit.calls} calls, {fit.served} answered, "
             f"{fit.abandoned} gave up, {fit.unresolved} unresolved; at most "
             f"{fit.most_in_talk} in talk at once",
             _profile_lines(fit)]
    if fit.hold is not None:
        parts.append(_families(fit.hold, "Hold"))
    if fit.patience is not None:
        parts.append(_families(fit.patience, "Patience (Kaplan-Meier on censored waits, "
                               "then families with censoring)"))
    parts += [f"note: {n}" for n in fit.notes]
    parts.append(_written(scenario_text, written))
    return "\n\n".join(parts)


def _written(scenario_text, written) -> str:
    if written:
        return f"scenario written to {written}"
    return "(write the fitted scenario with --write-scenario FILE)"


def counts_text(fit, scenario_text: str | None, written: str | None) -> str:
    f = fit.factor
    rows = [[lab, m, r, lo, hi, d] for lab, m, r, lo, hi, d in
            zip(fit.intervals, fit.mean, fit.rates, fit.low, fit.high, fit.dispersion)]
    high = "inf" if not math.isfinite(f.high) else f"{f.high:.4g}"
    parts = [f"fluidgap fit --counts: {fit.file}: {fit.days} days of {len(fit.rates)} "
             f"intervals of {fit.step:g}",
             format_table(["interval", "mean count", "rate", "low", "high", "dispersion"],
                          rows, title="Mean profile (95 % Poisson interval; dispersion = "
                          "variance / mean across days, 1 for Poisson)"),
             f"daily totals: mean {f.mean:.6g}, index of dispersion "
             f"{fit.total_dispersion:.4g} (Poisson tail probability "
             f"{fit.total_dispersion_p:.3g})",
             f"day factor (gamma, mean 1; Jongbloed and Koole 2001): cv {f.cv:.4g} "
             f"[{f.low:.4g}, {high}] (95 %, profile likelihood; moments {f.moments_cv:.4g}); "
             "random_rate: {dist: gamma, cv: " + f"{f.cv:.4g}" + "}",
             _written(scenario_text, written)]
    return "\n\n".join(parts)


def records_report(directory, fit, *, caution: str, summary: list[str], json_doc: dict):
    from .fit_figure import profile_figure, qq_figure, survival_figure
    from .html import write_report

    p = fit.profile
    import numpy as np

    starts = p.start + p.step * np.arange(p.counts.size)
    figures = {"profile": profile_figure(starts, p.step, p.rates, p.low, p.high,
                                         fit.time_unit)}
    tables = {"profile": p.to_frame()}
    if fit.hold is not None:
        figures["hold_qq"] = qq_figure(fit.hold_times, fit.hold.chosen, fit.time_unit)
        tables["hold_families"] = families_table(fit.hold)
    if fit.curve is not None:
        figures["patience_km"] = survival_figure(
            fit.curve, fit.patience.chosen if fit.patience else None, fit.time_unit)
        tables["patience_families"] = families_table(fit.patience)
    return write_report(directory, title=f"fluidgap fit: {fit.file}", summary_lines=summary,
                        tables=tables, figures=figures, json_doc=json_doc, caution=caution)


def counts_report(directory, fit, *, time_unit: str, caution: str, summary: list[str],
                  json_doc: dict):
    import numpy as np

    from .fit_figure import profile_figure
    from .html import write_report

    starts = fit.start + fit.step * np.arange(len(fit.rates))
    figures = {"profile": profile_figure(starts, fit.step, fit.rates, fit.low, fit.high,
                                         time_unit, title="Mean arrival profile")}
    return write_report(directory, title=f"fluidgap fit --counts: {fit.file}",
                        summary_lines=summary, tables={"profile": fit.to_frame()},
                        figures=figures, json_doc=json_doc, caution=caution)
