"""Plausibility of field readings: values that only make sense in another unit.

Vectorised, so a 50,000-row import is checked in one call. Each check returns an
array of messages ("" where the value is plausible); callers attach them to the
field and the row. Thresholds are common practice of the trade, no single source.
"""

from __future__ import annotations

import numpy as np

TWO_PI = 2.0 * np.pi


def _messages(condition, template, **columns):
    condition = np.atleast_1d(np.asarray(condition, bool))
    out = np.full(condition.shape, "", dtype=object)
    for i in np.flatnonzero(condition):
        out[i] = template.format(**{k: np.atleast_1d(v)[i if np.size(v) > 1 else 0] for k, v in columns.items()})
    return out


def capacitance_unit_slip(capacitance_uf, rated_uf):
    """A value 300-3000 times the rating was typed in nanofarads; 1000x too small
    in millifarads; more than three times the rating is not this capacitor."""
    c = np.atleast_1d(np.asarray(capacitance_uf, float))
    rated = np.atleast_1d(np.asarray(rated_uf, float))
    ratio = c / rated
    nano = (ratio > 300) & (ratio < 3000)
    milli = (ratio > 3e-4) & (ratio < 3e-3)
    wild = ~nano & (ratio > 3)
    return np.where(
        nano,
        _messages(nano, "{c:g} looks like nanofarads: {uf:g} uF? (rated {r:g} uF)", c=c, uf=c / 1000, r=rated),
        np.where(
            milli,
            _messages(milli, "{c:g} looks like millifarads: {uf:g} uF? (rated {r:g} uF)", c=c, uf=c * 1000, r=rated),
            _messages(wild, "{c:g} uF is over three times the rated {r:g} uF: wrong capacitor or unit?", c=c, r=rated),
        ),
    )


def current_unit_slip(current_a, voltage_v, rated_uf, frequency_hz):
    """A capacitor current 300-3000 times what the rating draws was typed in mA."""
    i = np.atleast_1d(np.asarray(current_a, float))
    expected = (
        TWO_PI * np.asarray(frequency_hz, float) * np.asarray(rated_uf, float) * 1e-6 * np.asarray(voltage_v, float)
    )
    ratio = i / np.atleast_1d(expected)
    milli = (ratio > 300) & (ratio < 3000)
    return _messages(
        milli, "{i:g} looks like milliamperes: {a:g} A? (expected about {e:.2f} A)", i=i, a=i / 1000, e=expected
    )


def off_trend(capacitance_uf, predicted_uf, rated_uf, threshold_fraction=0.08):
    """True where a reading sits more than `threshold_fraction` of the rating away
    from the capacitor's fitted trend: ask the technician to confirm or re-measure."""
    c = np.asarray(capacitance_uf, float)
    predicted = np.asarray(predicted_uf, float)
    return np.isfinite(predicted) & (np.abs(c - predicted) > threshold_fraction * np.asarray(rated_uf, float))
