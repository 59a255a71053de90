"""The CF time units of the output files (CF Conventions 1.11 section 4.4): ``days since``
the calendar start of the run (``output.start_date``, UTC) or a nominal start when the
scenario gives none; the calendar is ``proleptic_gregorian``."""
from __future__ import annotations

import datetime as dt

import numpy as np

__all__ = ["NOMINAL_START", "TIME_UNITS", "time_units", "time_start", "time_comment"]

#: Nominal start of the run. The model has no calendar; times are elapsed times.
NOMINAL_START = "2000-01-01 00:00:00"
TIME_UNITS = f"days since {NOMINAL_START}"


def time_units(start_date=None) -> str:
    """The CF units of the time coordinate (CF 1.11 section 4.4): ``days since`` the
    calendar start of the run in UTC, or since :data:`NOMINAL_START` when it has none.

    Parameters
    ----------
    start_date : datetime.datetime, optional
        Timezone-aware start of the run (``output.start_date``).

    Returns
    -------
    str

    Examples
    --------
    >>> import datetime as dt
    >>> time_units(dt.datetime(2027, 3, 1, tzinfo=dt.timezone.utc))
    'days since 2027-03-01 00:00:00'
    """
    if start_date is None:
        return TIME_UNITS
    utc = start_date.astimezone(dt.timezone.utc) if start_date.tzinfo else start_date
    text = utc.strftime("%Y-%m-%d %H:%M:%S")
    if utc.microsecond:
        text += f".{utc.microsecond:06d}"
    return f"days since {text}"


def time_start(units: str) -> np.datetime64:
    """The reference date of ``days since <date>`` units as a numpy datetime (ms).

    Parameters
    ----------
    units : str
        Time units as written by :func:`time_units`.

    Returns
    -------
    numpy.datetime64
    """
    if not units.startswith("days since "):
        raise ValueError(f"time units {units!r}: expected 'days since ...' as written by "
                         "write_column_netcdf")
    text = units[len("days since "):].strip().replace(" ", "T")
    return np.datetime64(text, "ms")


def time_comment(start_date=None) -> str:
    """The ``comment`` of the time coordinate: the calendar start of the run (UTC), or
    a note that :data:`NOMINAL_START` is only nominal when the run has none."""
    if start_date is None:
        return (f"The run starts at time 0; {NOMINAL_START} is a nominal start "
                "date, not a real one: read the values as elapsed days.")
    return (f"The run starts at time 0 on {time_units(start_date)[len('days since '):]} "
            "UTC (output.start_date of the scenario).")
