"""The evaluation in three short lines for the console: the standard's checks, the R^2 rule, the screening flags.
Pure Python (the command line imports it at start-up)."""
from __future__ import annotations

from ..units import small_length


def p_text(p) -> str:
    """A p-value for people: bounds below what a double can hold."""
    if p is None:
        return "-"
    if p < 1e-300:
        return "p < 1e-300"
    return f"p = {p:.2g}"


def _crit(c, short=False) -> str:
    if c.verdict in ("not assessed", "not applicable"):
        return f"{c.name}: {c.verdict}"
    ratio = f", ratio {c.ratio:.3g}" if c.ratio is not None else ""
    up = f" (95 % upper bound {c.ratio_upper95:.3g})" if c.ratio_upper95 is not None and not short else ""
    return f"{c.name}: {c.verdict}{ratio}{up}"


def verdict_lines(ev, units: str) -> list[str]:
    k, u = small_length(units)
    std = [c for c in ev.criteria if c.clause is not None]
    scr = [c for c in ev.criteria if c.clause is None]
    gov = next((c for c in std if c.name == ev.governing), None)
    first = f"standard's checks: {ev.verdict.upper()}"
    first += f", governed by {_crit(gov)}" if gov is not None else f" ({ev.governing})"
    others = [_crit(c, short=True) for c in std if c is not gov]
    if others:
        first += "; " + "; ".join(others)
    if ev.arc_table.illustrative:
        first += " [ILLUSTRATIVE arc table: demonstration only]"
    t = ev.tilt
    second = (f"R^2 rule: R^2 = {t.r_squared:.3f} {'>=' if t.r2_rule_met else '<'} {ev.settings.r2_min}: the standard "
              f"{'accepts' if t.r2_rule_met else 'does not accept'} the cosine fit for B.3.2.1; tilt "
              f"{t.amplitude * k:.{1 if u == 'mm' else 2}f} {u} lowest at {t.low_azimuth_deg:.0f} deg, "
              f"{'a real tilt plane' if t.significant else 'no significant tilt plane'} ({p_text(t.p_value)}, "
              f"{t.decided_by})")
    flags = []
    for c in scr:
        flags.append(f"{c.name}: RAISED, {c.governing}" if c.verdict == "exceeds" else f"{c.name}: {c.shown}")
    third = "screening (informs, never decides): " + "; ".join(flags)
    return [first, second, third]


def r2_rule_text(ev) -> str:
    t = ev.tilt
    r2min = ev.settings.r2_min
    if t.r2_rule_met:
        return f"R^2 = {t.r_squared:.3f} >= {r2min}: the standard accepts the cosine fit for its deflection check"
    return (f"R^2 = {t.r_squared:.3f} < {r2min}: the standard does not accept the cosine fit for its deflection check "
            f"(B.3.2.1 shown for information); the tilt is judged by the {t.decided_by} and the settled-arc check "
            f"(B.3.2.2) applies")


def month_text(iso) -> str:
    """An extrapolated ISO date for people: to the month (a linear extrapolation of two surveys is no more)."""
    return iso[:7] if isinstance(iso, str) and len(iso) >= 7 else str(iso)
