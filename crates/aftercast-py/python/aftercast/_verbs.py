"""The analysis functions. Each is made from the command line's own option list
(``_native.options``): the names are the flags with ``_`` for ``-``, the defaults and help are
the flags', and a call becomes the very command line the binary would run, so there is one list
of options, never a second one kept by hand."""

from __future__ import annotations

import datetime as _dt
import inspect
import math
import numbers
import os
import re
from typing import Any, Callable

from . import _native
from ._errors import Error, OptionError
from ._result import Result

# Options of the command line that write files or print; a result object does that instead
# (to_json, report) and Python prints nothing.
_OUTPUT_ONLY = {"json", "out", "force", "quiet"}


def _is_table(value: Any) -> bool:
    """A table: anything with the Arrow stream interface (pyarrow, polars, pandas 2.2+), or a
    pandas or polars DataFrame (or pandas Series) of a version without it."""
    if hasattr(value, "__arrow_c_stream__"):
        return True
    module = (type(value).__module__ or "").split(".")[0]
    return module in ("pandas", "polars") and type(value).__name__ in ("DataFrame", "Series")


def _as_arrow(value: Any) -> Any:
    """A table as an object with ``__arrow_c_stream__`` (no copy for pyarrow and polars)."""
    module = type(value).__module__ or ""
    if module.startswith("pandas"):
        import pandas as pd
        import pyarrow as pa

        if isinstance(value, pd.Series):
            value = value.to_frame()
        # a named index (a date index, a unit id) becomes a column of its name
        try:
            return pa.Table.from_pandas(value, preserve_index=None)
        except (pa.ArrowInvalid, pa.ArrowTypeError):
            # a column mixing numbers and text (as a messy file would): every cell as its text,
            # so that the reader names the cell that is not a number
            return pa.Table.from_pandas(_as_text_where_mixed(value), preserve_index=None)
    if hasattr(value, "__arrow_c_stream__"):
        return value
    if hasattr(value, "to_arrow"):
        return value.to_arrow()
    raise TypeError(f"cannot read a {type(value).__name__} as a table")


def _as_text_where_mixed(frame: Any) -> Any:
    import pandas as pd

    def cell(v: Any) -> Any:
        if v is None or (isinstance(v, float) and math.isnan(v)) or v is pd.NA:
            return None
        return str(v)

    out = frame.copy()
    for c in out.columns:
        if out[c].dtype == object:
            out[c] = out[c].map(cell).astype(object)
    return out


def _text(value: Any, name: str) -> str:
    """One option value as the command line takes it."""
    if isinstance(value, bool):
        raise TypeError(f"{name} takes a value, not {value}")
    if isinstance(value, str):
        return value
    if isinstance(value, os.PathLike):
        return os.fspath(value)
    if isinstance(value, _dt.datetime) or type(value).__name__ == "Timestamp":
        # a date with no time of day is the date the time column holds
        if (value.hour, value.minute, value.second, value.microsecond) == (0, 0, 0, 0):
            return value.date().isoformat()
        return value.isoformat()
    if isinstance(value, _dt.date):
        return value.isoformat()
    if isinstance(value, numbers.Integral):
        return str(int(value))
    if isinstance(value, numbers.Real):
        v = float(value)
        if not math.isfinite(v):
            raise OptionError(f"{name}: {v} is not a finite number")
        return repr(v)
    raise TypeError(f"{name}: cannot pass a {type(value).__name__} (give text, a number or a date)")


def _default(option: dict) -> Any:
    """The flag's default as a Python value, for the signature and help."""
    if option["switch"]:
        return False
    values = option["defaults"]
    if not values:
        return [] if option["list"] else None

    def one(v: str) -> Any:
        for kind in (int, float):
            try:
                return kind(v)
            except ValueError:
                pass
        return v

    if option["list"]:
        return [one(p) for v in values for p in v.split(",")]
    return one(values[0])


_FLAG = re.compile(r"'?--([a-z][a-z0-9-]*)(?: <[A-Z_]+>(?:\.\.\.)?)?'?")


class _Verb:
    """One analysis function: its command-line path, its first argument and its options."""

    def __init__(self, name: str, path: list[str], first: str | None, doc: str):
        self.name = name
        self.path = path
        self.first = first
        self.doc = doc
        self.options = [o for o in _native.options(path) if o["name"] not in _OUTPUT_ONLY]
        self.by_name = {o["name"]: o for o in self.options}
        self.by_flag = {o["flag"]: o["name"] for o in self.options if o["flag"]}

    def python_words(self, message: str) -> str:
        """A message of the command line with its flags named as this function's arguments."""

        def word(m: re.Match) -> str:
            name = self.by_flag.get("--" + m.group(1))
            return f"'{name}'" if name else m.group(0)

        return _FLAG.sub(word, message)

    def signature(self) -> inspect.Signature:
        params = []
        kind = inspect.Parameter.KEYWORD_ONLY
        if self.first:
            o = self.by_name[self.first]
            default = inspect.Parameter.empty if o["required"] else None
            params.append(inspect.Parameter(self.first, inspect.Parameter.POSITIONAL_OR_KEYWORD, default=default))
        required = [o for o in self.options if o["required"] and o["name"] != self.first]
        rest = [o for o in self.options if not o["required"] and o["name"] != self.first]
        for o in required:
            params.append(inspect.Parameter(o["name"], kind))
        for o in rest:
            params.append(inspect.Parameter(o["name"], kind, default=_default(o)))
        return inspect.Signature(params, return_annotation=Result)

    def docstring(self) -> str:
        lines = [self.doc, "", "Parameters", "----------"]
        for p in self.signature().parameters.values():
            o = self.by_name[p.name]
            shown = "" if p.default is inspect.Parameter.empty else f" (default {p.default!r})"
            req = " (required)" if p.default is inspect.Parameter.empty else ""
            help_text = " ".join(o["help"].split())
            if o["choices"]:
                help_text += " One of: " + ", ".join(o["choices"]) + "."
            lines.append(f"{p.name}{req}{shown}")
            lines.append(f"    {help_text}")
        lines += [
            "",
            "A table argument takes a pandas or polars DataFrame, a pyarrow Table, or the path of a",
            "CSV or Parquet file. Lists take Python lists. Returns a :class:`aftercast.Result`.",
        ]
        return "\n".join(lines)

    def __call__(self, args: tuple, kwargs: dict) -> Result:
        if len(args) > (1 if self.first else 0):
            raise TypeError(f"{self.name}() takes the table as its one positional argument; give the rest by name")
        if args:
            if self.first in kwargs:
                raise TypeError(f"{self.name}() got two values for '{self.first}'")
            kwargs = {self.first: args[0], **kwargs}
        unknown = [k for k in kwargs if k not in self.by_name]
        if unknown:
            known = ", ".join(sorted(self.by_name))
            raise TypeError(f"{self.name}() got an unexpected keyword argument '{unknown[0]}' (its options: {known})")
        missing = [o["name"] for o in self.options if o["required"] and kwargs.get(o["name"]) is None]
        if missing:
            raise TypeError(f"{self.name}() missing required argument(s): " + ", ".join(f"'{m}'" for m in missing))
        argv = list(self.path)
        tables: list[tuple[str, str, Any]] = []
        shown: list[str] = []
        for name, value in kwargs.items():
            if value is None:
                continue
            o = self.by_name[name]
            flag = o["flag"]
            if o["switch"]:
                if not isinstance(value, (bool, int)):
                    raise TypeError(f"{name} takes True or False")
                if value:
                    argv.append(flag)
                    shown.append(f"{name}=True")
                continue
            named = isinstance(value, dict)
            many = named or isinstance(value, (list, tuple))
            if many and not o["list"]:
                raise TypeError(f"{name} takes one value, not a list")
            # tables of a list option may be named: pool={"members": df, "prospects": df2}
            items = list(value.items()) if named else [(None, v) for v in (value if many else [value])]
            for i, (key, item) in enumerate(items):
                if _is_table(item):
                    if key is not None:
                        label, short = f"DataFrame '{key}'", str(key)
                    elif len(items) == 1:
                        label, short = f"DataFrame '{name}'", name
                    else:
                        label, short = f"DataFrame '{name}[{i}]'", f"{name} {i + 1}"
                    tables.append((label, short, _as_arrow(item)))
                    argv += [flag, label]
                elif key is not None:
                    raise TypeError(f"{name}: only tables can be given by name (a dict)")
                else:
                    argv += [flag, _text(item, name)]
            shown.append(name if name == self.first and _is_table(value) else f"{name}={_shown(value)}")
        call = f"aftercast.{self.name}({', '.join(shown)})"
        threads = kwargs.get("threads")
        try:
            native = _native.run(argv, tables, int(threads) if threads is not None else None)
        except Error as e:
            raise type(e)(self.python_words(str(e))) from None
        return Result(native, call)


def _shown(value: Any) -> str:
    if _is_table(value):
        return f"<{type(value).__name__}>"
    if isinstance(value, dict):
        return "{" + ", ".join(f"{k!r}: {_shown(v)}" for k, v in value.items()) + "}"
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(_shown(v) for v in value) + "]"
    if isinstance(value, (str, bool, int, float)):
        return repr(value)
    return repr(str(value))


def _function(name: str, path: list[str], first: str | None, doc: str) -> Callable[..., Result]:
    verb = _Verb(name, path, first, doc)

    def analysis(*args: Any, **kwargs: Any) -> Result:
        return verb(args, kwargs)

    analysis.__name__ = analysis.__qualname__ = name
    analysis.__module__ = "aftercast"
    analysis.__signature__ = verb.signature()  # type: ignore[attr-defined]
    analysis.__doc__ = verb.docstring()
    return analysis


forecast = _function(
    "forecast",
    ["forecast"],
    "data",
    "Counterfactual of one series from its own past and control series (seasonal forecast).",
)
synthetic = _function(
    "synthetic",
    ["synthetic"],
    "data",
    "Synthetic control: a weighted mix of untouched units as the counterfactual of treated units.",
)
match = _function(
    "match",
    ["match"],
    "data",
    "Propensity-score matching and weighting on a unit table (changes units opted into).",
)
rollout = _function(
    "rollout",
    ["rollout"],
    "data",
    "A change adopted in waves: group-time effects, imputation, synthetic difference-in-differences per wave.",
)
compare = _function(
    "compare",
    ["compare"],
    "experiment",
    "Observational estimates against a randomized experiment's answer (or a plasmode simulation).",
)

_PLANS = {
    kind: _function(
        f"plan_{kind}",
        ["plan", kind],
        "data",
        f"How long to wait (or how many units to have) to see a change of a given size, from placebo "
        f"runs of the {kind} analysis's own set-up.",
    )
    for kind in ("forecast", "synthetic", "match")
}


def plan(kind: str, data: Any = None, /, **options: Any) -> Result:
    """How long to wait (or how many units to have) to see a change of a given size: placebo
    runs of the analysis's own set-up. ``kind`` is "forecast", "synthetic" or "match"; the other
    arguments are that analysis's (``help(aftercast.plan_options(kind))`` lists them) plus the
    plan's own (placebos, lifts, power, waits, min_train, sizes, run_draws)."""
    if kind not in _PLANS:
        raise OptionError(f"plan: kind must be one of {', '.join(_PLANS)}, not {kind!r}")
    args = () if data is None else (data,)
    return _PLANS[kind](*args, **options)


def plan_options(kind: str) -> Callable[..., Result]:
    """The plan function of one kind, with its full signature and help."""
    if kind not in _PLANS:
        raise OptionError(f"plan: kind must be one of {', '.join(_PLANS)}, not {kind!r}")
    return _PLANS[kind]
