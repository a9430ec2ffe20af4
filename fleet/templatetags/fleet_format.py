"""Numbers for people: shares as whole percentages, counts with thousands separators, a dash for none."""

from __future__ import annotations

from django import template

register = template.Library()

DASH = "-"
NBSP = "\u00a0"
MINUS = "\u2212"
TIMES = "\u00d7"


@register.filter
def percent(share):
    """0.573 -> '57 %'; None -> '-'."""
    return DASH if share is None else f"{100 * share:.0f}{NBSP}%"


@register.filter
def signed_percent(share):
    """0.23 -> '+23 %', -0.4 -> '-40 %' (a true minus sign); None -> '-'."""
    if share is None:
        return DASH
    value = round(100 * share)
    sign = "+" if value > 0 else MINUS if value < 0 else ""
    return f"{sign}{abs(value)}{NBSP}%"


@register.filter
def thousands(count):
    """3637 -> '3,637'; None -> '-'."""
    return DASH if count is None else f"{count:,}"


@register.filter
def times(factor):
    """1.523 -> 'x 1.52' with a multiplication sign."""
    return DASH if factor is None else f"{TIMES}{NBSP}{factor:.2f}"
