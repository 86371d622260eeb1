"""aftercast: measure what a change did when nobody kept a randomized control group.

Each function runs one analysis of the command line of the same name, with the same options
and defaults (read from the command line's own definitions), on pandas or polars DataFrames,
pyarrow tables or file paths, and returns a :class:`Result`::

    import aftercast as ac
    import pandas as pd

    daily = pd.read_csv("demo-data/app_daily.csv")
    r = ac.forecast(daily, time="date", outcome="app_orders", start="2026-03-02",
                    controls=["catalogue_orders", "weather_index"], log=True)
    r.estimate, r.interval, r.verdict
    r.summary()          # one row per quantity (average, cumulative, relative)
    r.path()             # observed and counterfactual per period
    r.report("app.html") # the same report the command line writes

Observational estimates rest on assumptions no data can prove; every result lists them
(``r.assumptions``), and a randomized test is stronger evidence where one is possible.
"""

from ._errors import DataError, Error, InternalError, OptionError
from ._native import __version__
from ._result import Result
from ._verbs import compare, forecast, match, plan, plan_options, rollout, synthetic

__all__ = [
    "DataError",
    "Error",
    "InternalError",
    "OptionError",
    "Result",
    "__version__",
    "compare",
    "forecast",
    "match",
    "plan",
    "plan_options",
    "rollout",
    "synthetic",
]
