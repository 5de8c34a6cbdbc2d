"""Dates and times as the score: the distance from the cutoff date, in a unit the user chooses.

A policy that starts on a day, a school-entry birthday or an eligibility age makes the score a
date. The engine works on numbers, so a date score becomes ``(score - cutoff) / unit`` (a float
distance, negative before the cutoff) and the cutoff becomes 0; every number then equals the fit
on that numeric distance. ``TimeScale`` remembers the cutoff date and the unit so that results
can speak in dates ("cutoff 2024-07-01", "bandwidth 41.5 days").

This module belongs to the data layer: it touches pandas and nothing above it.
"""
from __future__ import annotations

import datetime as _dt
import re
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from .errors import ColumnTypeError, CutoffTypeError, EmptyColumnError, InvalidOptionError, shown
from .options import SCORE_UNITS, check_option

# Seconds per unit. Months and years are average lengths (365.25 / 12 = 30.4375 days and 365.25
# days), common practice for ages and durations measured in months or years.
UNIT_SECONDS: dict[str, float] = {
    "hours": 3600.0,
    "days": 86400.0,
    "weeks": 7 * 86400.0,
    "months": 30.4375 * 86400.0,
    "years": 365.25 * 86400.0,
}

#: What a cutoff in time adds to the usual cautions (Hausman and Rapson 2018, Annual Review of
#: Resource Economics 10: 533-552, "Regression discontinuity in time").
TIME_CAUTION = ("The score is time, so three more threats apply (Hausman and Rapson 2018): outcomes close in "
                "time are correlated (consider clustering by a time unit such as the week); people may "
                "anticipate or respond late to the date (compare a donut around it); and anything else that "
                "changed on the same date is part of the estimate.")


def is_time_value(value: Any) -> bool:
    """A date, datetime, pandas Timestamp or numpy datetime64 (not a string, not a number)."""
    return isinstance(value, (_dt.date, np.datetime64))   # datetime and Timestamp subclass date


_ISO_DATE = re.compile(r"^\s*\d{4}-\d{1,2}-\d{1,2}")


def looks_like_date(value: Any) -> bool:
    """A string that starts like an ISO date ("2024-07-01", "2024-07-01 08:00")."""
    return isinstance(value, str) and bool(_ISO_DATE.match(value))


def is_time_column(column: pd.Series) -> bool:
    """True for datetime64 columns (with or without a time zone) and object columns of dates."""
    if pd.api.types.is_datetime64_any_dtype(column):
        return True
    if column.dtype != object:
        return False
    # any date makes it a date score, so a column mixing numbers and dates is named as a mix
    # (by _as_datetimes) rather than failing later as a numeric score with a date cutoff
    return bool(column.dropna().map(is_time_value).any())


def _time_zone(value) -> Any:
    return getattr(value, "tzinfo", None)


def _as_datetimes(column: pd.Series, name: str) -> pd.Series:
    """A date score as datetime64 (NaT for missing); a mix of dates and other values is an error."""
    if pd.api.types.is_datetime64_any_dtype(column):
        return column
    values = column.dropna()
    odd = values[~values.map(is_time_value)]
    if len(odd):
        row, value = odd.index[0], odd.iloc[0]
        raise ColumnTypeError(f"`score` column {shown(name)} must hold dates only; got a mix of dates and "
                              f"{type(value).__name__} values (e.g. {shown(value)} at row {shown(row)}). Convert it with "
                              "pandas.to_datetime(column, errors='coerce') (unparseable values become missing).")
    zones = {str(_time_zone(v)) for v in values}
    if len(zones) > 1:
        raise ColumnTypeError(f"`score` column {shown(name)} must use one time zone; got {shown(sorted(zones))}. Convert it "
                              "with pandas.to_datetime(column, utc=True).")
    return pd.to_datetime(column)


def _as_timestamp(cutoff: Any, score: str, zone) -> pd.Timestamp:
    """The cutoff as a Timestamp in the score's time zone; a naive/aware mismatch is an error."""
    if isinstance(cutoff, str):
        try:
            stamp = pd.Timestamp(cutoff.strip())
        except ValueError:
            raise CutoffTypeError(f"`cutoff` must be a date for the date score {shown(score)}; got {shown(cutoff)}. "
                                  "Write it as an ISO date, e.g. \"2024-07-01\".") from None
        # A typed date means that date where the data were recorded: take the score's time zone.
        if stamp.tzinfo is None and zone is not None:
            stamp = stamp.tz_localize(zone)
    elif is_time_value(cutoff):
        stamp = pd.Timestamp(cutoff)
    else:
        raise CutoffTypeError(f"`cutoff` must be a date for the date score {shown(score)}; got {shown(cutoff)}. Pass "
                              "e.g. cutoff=\"2024-07-01\" or pandas.Timestamp(\"2024-07-01\").")
    if pd.isna(stamp):
        raise CutoffTypeError(f"`cutoff` must be a date for the date score {shown(score)}; got a missing date. "
                              "Pass e.g. cutoff=\"2024-07-01\".")
    if (stamp.tzinfo is None) != (zone is None):
        if zone is not None:
            raise CutoffTypeError(f"`cutoff` must carry the time zone of score {shown(score)} ({zone}); got "
                                  f"{stamp.isoformat()} without one. Localise it, e.g. "
                                  f"pandas.Timestamp(\"2024-07-01\", tz=\"{zone}\").")
        raise CutoffTypeError(f"`cutoff` must have no time zone, like score {shown(score)}; got {stamp.isoformat()} "
                              f"in time zone {stamp.tzinfo}. Drop the zone with .tz_localize(None), or localise "
                              "the score column.")
    return stamp


@dataclass(frozen=True)
class TimeScale:
    """How a date score maps to numbers: distance = (score - cutoff) / unit.

    Attributes
    ----------
    cutoff : pandas.Timestamp
        The cutoff date (in the score's time zone, if it has one).
    unit : str
        "hours", "days", "weeks", "months" (30.4375 days) or "years" (365.25 days).
    with_time : bool
        Whether the score or the cutoff carries a time of day (dates are then shown with times).
    """
    cutoff: pd.Timestamp
    unit: str
    with_time: bool = False

    @property
    def seconds(self) -> float:
        return UNIT_SECONDS[self.unit]

    def distance(self, column: pd.Series) -> np.ndarray:
        """Float distances from the cutoff in ``unit`` (NaN where the date is missing)."""
        delta = (column - self.cutoff).dt.total_seconds().to_numpy(dtype=float, na_value=np.nan)
        return delta / self.seconds

    def to_time(self, distance) -> pd.Timestamp | pd.DatetimeIndex:
        """The date (or dates) at the given distance(s) from the cutoff."""
        if np.ndim(distance) == 0:
            return self.cutoff + pd.to_timedelta(float(distance) * self.seconds, unit="s")
        return self.cutoff + pd.to_timedelta(np.asarray(distance, dtype=float) * self.seconds, unit="s")

    def label(self, distance: float = 0.0) -> str:
        """The date at ``distance`` written for a reader: ISO date, with the time when it matters."""
        stamp = self.to_time(distance)
        if not self.with_time:
            return stamp.date().isoformat()
        return stamp.isoformat(sep=" ", timespec="minutes")

    def length(self, value: float) -> str:
        """A bandwidth or radius with its unit: "41.5 days"."""
        unit = self.unit[:-1] if value == 1 else self.unit
        return f"{value:.4g} {unit}"


def time_scale(column: pd.Series, cutoff: Any, unit: str | None, score: str) -> tuple[TimeScale, np.ndarray]:
    """Validate a date score and its cutoff; return the scale and the float distances."""
    unit = check_option("score_unit", "days" if unit is None else unit, SCORE_UNITS)
    dates = _as_datetimes(column, score)
    if not dates.notna().any():
        raise EmptyColumnError(f"`score` column {shown(score)} must have non-missing values; got only missing dates. "
                               "Choose a column with data.")
    zone = dates.dt.tz
    stamp = _as_timestamp(cutoff, score, zone)
    if zone is not None:
        stamp = stamp.tz_convert(zone)
    finite = dates.dropna()
    with_time = bool((stamp != stamp.normalize()) or (finite != finite.dt.normalize()).any())
    scale = TimeScale(cutoff=stamp, unit=unit, with_time=with_time)
    return scale, scale.distance(dates)


def reject_time_cutoff(cutoff: Any, score: str, unit: str | None) -> float:
    """The cutoff of a numeric score as a float; dates, date strings and a unit are errors here."""
    if unit is not None:
        raise InvalidOptionError(f"`score_unit` applies to date or time scores only; got {shown(unit)} for the "
                                 f"numeric score {shown(score)}. Remove it, or declare a date or datetime column as the score.")
    if is_time_value(cutoff):
        raise CutoffTypeError(f"`cutoff` must be a number for the numeric score {shown(score)}; got {shown(cutoff)}. Give "
                              "the cutoff in the score's units, or declare a date column as the score.")
    try:
        return float(cutoff)
    except (TypeError, ValueError):
        pass
    if looks_like_date(cutoff):
        raise CutoffTypeError(f"`cutoff` must be a number for the numeric score {shown(score)}; got the date "
                              f"{shown(cutoff)}. Give the cutoff in the score's units, or declare a date column as "
                              "the score (convert text dates with pandas.to_datetime).")
    raise InvalidOptionError(f"`cutoff` must be a number; got {shown(cutoff)}. Pass e.g. cutoff=40.")
