"""The analysis functions. Each is made from the command line's own option list
(``_native.options``): the names are the flags with ``_`` for ``-``, the defaults and help are
the flags', and a call becomes the very command line the binary would run, so there is one list
of options, never a second one kept by hand."""

from __future__ import annotations

import collections.abc
import datetime as _dt
import inspect
import math
import numbers
import os
import re
from typing import Any, Callable

from . import _native
from ._errors import DataError, Error, OptionError
from ._result import Result

# Options of the command line that write files or print; a result object does that instead
# (to_json, report) and Python prints nothing.
_OUTPUT_ONLY = {"json", "out", "force", "quiet"}


def _is_table(value: Any) -> bool:
    """A table: a pandas or polars DataFrame, or anything else with the Arrow stream interface
    (a pyarrow Table or RecordBatchReader) that is not a one-dimensional array."""
    module = (type(value).__module__ or "").split(".")[0]
    if module in ("pandas", "polars"):
        return type(value).__name__ == "DataFrame"
    return hasattr(value, "__arrow_c_stream__") and _list_like(value) is None


def _list_like(value: Any, name: str = "", quiet: bool = False) -> list | None:
    """A one-dimensional list-like (list, tuple, set, range, pandas Series or Index, NumPy
    array, pyarrow or polars array) as a Python list; None for anything else."""
    if isinstance(value, (str, bytes, os.PathLike, dict)):
        return None
    if isinstance(value, (list, tuple, range)):
        return list(value)
    if isinstance(value, (set, frozenset)):
        # a set has no order of its own; the command line's is the order given
        return sorted(value, key=str)
    kind = type(value).__name__
    module = (type(value).__module__ or "").split(".")[0]
    if module == "numpy" and kind == "ndarray":
        if value.ndim != 1:
            if quiet:
                return None
            raise TypeError(f"'{name}' takes a one-dimensional array, not one of shape {value.shape}")
        return value.tolist()
    if module == "pandas" and kind != "DataFrame" and hasattr(value, "tolist"):
        # a Series, an Index, an extension array (ArrowStringArray, Categorical, pd.array)
        if getattr(value, "ndim", 1) != 1:
            if quiet:
                return None
            raise TypeError(f"'{name}' takes a one-dimensional array, not a {kind}")
        return value.tolist()
    if module == "polars" and kind == "Series":
        return value.to_list()
    if module == "pyarrow" and kind.endswith("Array"):
        return value.to_pylist()
    if isinstance(value, (collections.abc.KeysView, collections.abc.ValuesView, collections.abc.Iterator)):
        # dict keys, a generator, map(), iter()
        return list(value)
    return None


def _as_arrow(value: Any, label: str) -> Any:
    """A table as an object with ``__arrow_c_stream__`` (no copy for pyarrow and polars); a
    table pyarrow cannot take raises DataError naming the argument."""
    try:
        return _arrow_of(value)
    except (TypeError, ValueError, ImportError) as e:
        raise DataError(f"{label}: cannot be read as a table ({_one_line(e)})") from None
    except Exception as e:  # pyarrow's own errors (ArrowInvalid, ArrowNotImplementedError)
        if (type(e).__module__ or "").startswith("pyarrow"):
            raise DataError(f"{label}: cannot be read as a table ({_one_line(e)})") from None
        raise


def _one_line(e: BaseException) -> str:
    parts = e.args if len(e.args) > 1 and all(isinstance(a, str) for a in e.args) else (str(e),)
    # pyarrow gives (cause, what failed): the column first
    text = " ".join("; ".join(reversed(parts)).split())
    return text if len(text) <= 200 else text[:197] + "..."


def _arrow_of(value: Any) -> Any:
    module = type(value).__module__ or ""
    if module.startswith("pandas"):
        import pandas as pd
        import pyarrow as pa

        frame = value.to_frame() if isinstance(value, pd.Series) else value
        duplicated = frame.columns[frame.columns.duplicated()].unique().tolist()
        if duplicated:
            raise ValueError(f"column '{duplicated[0]}' appears more than once")
        frame = _plain_pandas(frame)
        # a named index (a date index, a unit id) becomes a column of its name
        try:
            return pa.Table.from_pandas(frame, preserve_index=None)
        except (pa.ArrowInvalid, pa.ArrowTypeError):
            # a column mixing numbers and text (as a messy file would): every cell as its text,
            # so that the reader names the cell that is not a number
            return pa.Table.from_pandas(_as_text_where_mixed(frame, pd), preserve_index=None)
    if hasattr(value, "__arrow_c_stream__"):
        return value
    if hasattr(value, "to_arrow"):
        return value.to_arrow()
    raise TypeError(f"cannot read a {type(value).__name__} as a table")


def _plain_pandas(frame: Any) -> Any:
    """A pandas frame whose periods are dates: a period (a month, a week) is the date it begins,
    as the command line reads a time column; its text would not be a date and its Arrow
    storage is a bare count."""
    import pandas as pd

    periods = [c for c, kind in frame.dtypes.items() if isinstance(kind, pd.PeriodDtype)]
    if periods:
        frame = frame.copy()
        for c in periods:
            frame[c] = frame[c].dt.start_time
    if isinstance(frame.index, pd.PeriodIndex):
        frame = frame.set_axis(frame.index.start_time.rename(frame.index.name), axis=0)
    return frame


def _as_text_where_mixed(frame: Any, pd: Any) -> Any:
    def cell(v: Any) -> Any:
        if v is None or (not isinstance(v, (list, tuple, dict)) and pd.isna(v)):
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
    kind = type(value).__name__
    if kind in ("NaTType", "NAType") or (kind == "datetime64" and str(value) == "NaT"):
        raise OptionError(f"'{name}' is missing (NaT): give a date")
    if kind == "datetime64":
        # NumPy's date: through a Python datetime (to the microsecond)
        return _text(value.astype("datetime64[us]").item(), name)
    if kind == "Period":
        # a month or a week is the date it begins, as its column is read
        return _text(value.start_time, name)
    if isinstance(value, _dt.datetime) or kind == "Timestamp":
        # a date with no time of day is the date the time column holds (in its own zone)
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
            raise OptionError(f"'{name}': {v} is not a finite number")
        # a whole float (draws=1e3) is the whole number: a count reads it, a rate too
        if v.is_integer() and abs(v) < 2**53:
            return str(int(v))
        return repr(v)
    raise TypeError(f"{name}: cannot pass a {kind} (give text, a number or a date)")


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


# A flag as the command line's messages write it: quoted with its value's placeholder
# ('--threads <THREADS>', from the flag parser) or bare in a sentence (--level, `--start`),
# then perhaps a value (--missing drop-row). A quoted name without a placeholder is the user's
# own text ('--revenue', a column), and a flag inside a word or after a quote or an HTML entity
# is text too: neither is touched.
_FLAG = re.compile(
    r"(?:'--(?P<quoted>[a-z][a-z0-9-]*) <[A-Z_]+>(?:\.\.\.)?'"
    r"|(?<![\w'\\;&`-])(?P<tick>`?)--(?P<bare>[a-z][a-z0-9-]*)(?P=tick)(?![\w'-]))"
    r"(?: (?P<value>[a-z][a-z0-9-]*))?"
)
_VERB_NAME = re.compile(r"`aftercast (forecast|synthetic|match|rollout|compare|plan)`")


def _all_flags() -> frozenset:
    """Every flag of the analyses the module has (a message may name another verb's)."""
    global _FLAGS
    if _FLAGS is None:
        paths = [["forecast"], ["synthetic"], ["match"], ["rollout"], ["compare"]]
        paths += [["plan", k] for k in ("forecast", "synthetic", "match")]
        _FLAGS = frozenset(o["flag"] for p in paths for o in _native.options(p) if o["flag"])
    return _FLAGS


_FLAGS: frozenset | None = None


# words that follow a flag in a sentence without being its value ("--min-train or --waits")
_PROSE = frozenset(
    "a an and are as at be by for from if in is it its needs not of on or plus the to was when with "
    "works leaves among after left away".split()
)


def _is_value_of(option: dict, value: str) -> bool:
    """Whether a word after the option's flag in a message is a value of it (`--model auto`):
    one of its choices, its default, or a word its help names, and not a word of prose."""
    if option["table"] or option["switch"] or value in _PROSE:
        return False
    if value in option["choices"] or value in option["defaults"]:
        return True
    return re.search(rf"(?<![\w-]){re.escape(value)}(?![\w-])", option["help"]) is not None


class _Verb:
    """One analysis function: its command-line path, its first argument and its options."""

    def __init__(self, name: str, path: list[str], first: str | None, doc: str, lead: str | None = None):
        self.name = name
        # how a call is written: plan('match', ...) for the plan of a kind
        self.lead = [lead] if lead else []
        self.shown_as = f"{name}({lead or ''})"
        self.path = path
        self.first = first
        self.doc = doc
        self.options = [o for o in _native.options(path) if o["name"] not in _OUTPUT_ONLY]
        self.by_name = {o["name"]: o for o in self.options}
        self.by_flag = {o["flag"]: o["name"] for o in self.options if o["flag"]}

    def python_words(self, message: str) -> str:
        """A message of the command line with its flags named as this function's arguments:
        ``--missing drop-row`` becomes ``missing='drop-row'``, ``--controls`` ``'controls'``;
        ``plan match`` becomes ``plan('match')``. The user's own text (quoted names, cells) is
        left as it is."""
        known = _all_flags()

        def word(m: re.Match) -> str:
            flag = m.group("quoted") or m.group("bare")
            value = m.group("value")
            if "--" + flag not in known:
                return m.group(0)
            name = self.by_flag.get("--" + flag, flag.replace("-", "_"))
            o = self.by_name.get(name)
            tick = m.group("tick") or ""
            if value and o and _is_value_of(o, value):
                return f"{tick}{name}='{value}'{tick}"
            rest = f" {value}" if value else ""
            if o and o["switch"]:
                return f"{tick}{name}=True{tick}{rest}"
            return (f"`{name}`" if tick else f"'{name}'") + rest

        said = _FLAG.sub(word, message)
        said = _VERB_NAME.sub(lambda m: f"`aftercast.{m.group(1)}()`", said)
        if self.lead:
            kind = self.path[-1]
            said = re.sub(rf"(?<![\w'])plan {kind}(?![\w'-])", f"plan({kind!r})", said)
        return said

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

    def parameters_doc(self) -> list[str]:
        lines = []
        for p in self.signature().parameters.values():
            o = self.by_name[p.name]
            shown = "" if p.default is inspect.Parameter.empty else f" (default {p.default!r})"
            req = " (required)" if p.default is inspect.Parameter.empty else ""
            help_text = self.python_words(" ".join(o["help"].split()))
            help_text = re.sub(r"\(comma-separated ", "(", help_text)
            help_text = re.sub(r",? comma-separated", "", help_text)
            if o["list"] and not o["table"]:
                help_text += " (a list)"
            if help_text and not help_text.endswith("."):
                help_text += "."
            if o["table"]:
                help_text += " A DataFrame, a pyarrow Table or a file path" + (
                    "; several as a list, or as a dict naming each." if o["list"] else "."
                )
            if o["choices"]:
                help_text += " One of: " + ", ".join(o["choices"]) + "."
            lines.append(f"{p.name}{req}{shown}")
            lines.append(f"    {help_text}")
        return lines

    def docstring(self) -> str:
        lines = [self.doc, "", "Parameters", "----------", *self.parameters_doc()]
        lines += [
            "",
            "Tables are pandas or polars DataFrames, pyarrow Tables, or paths of CSV or Parquet",
            "files. Lists take any list-like (a list, a tuple, a pandas Series or Index, a NumPy",
            "array). Returns a :class:`aftercast.Result`.",
        ]
        return "\n".join(lines)

    def _table(self, name: str, value: Any, label: str, short: str, tables: list) -> str:
        """One value of a table option: a table handed over under `label`, or a path."""
        if isinstance(value, (str, os.PathLike)):
            return _text(value, name)
        if _is_table(value) or isinstance(value, _pandas_series_type()):
            tables.append((label, short, _as_arrow(value, label)))
            return label
        raise TypeError(
            f"{self.shown_as}: '{name}' takes a DataFrame, a pyarrow Table or a file path, "
            f"not {_a(type(value).__name__)}"
        )

    def __call__(self, args: tuple, kwargs: dict) -> Result:
        if len(args) > (1 if self.first else 0):
            raise TypeError(f"{self.shown_as} takes the table as its one positional argument; give the rest by name")
        if args:
            if self.first in kwargs:
                raise TypeError(f"{self.shown_as} got two values for '{self.first}'")
            kwargs = {self.first: args[0], **kwargs}
        unknown = [k for k in kwargs if k not in self.by_name]
        if unknown:
            known = ", ".join(sorted(self.by_name))
            raise TypeError(f"{self.shown_as} got an unexpected keyword argument '{unknown[0]}' (its options: {known})")
        missing = [o["name"] for o in self.options if o["required"] and kwargs.get(o["name"]) is None]
        if missing:
            raise TypeError(f"{self.shown_as} missing required argument(s): " + ", ".join(f"'{m}'" for m in missing))
        argv = list(self.path)
        tables: list[tuple[str, str, Any]] = []
        shown: list[str] = []
        for name, value in kwargs.items():
            if value is None:
                continue
            o = self.by_name[name]
            flag = o["flag"]
            if o["switch"]:
                if not isinstance(value, (bool, int)) or isinstance(value, int) and value not in (0, 1):
                    raise TypeError(f"{self.shown_as}: '{name}' takes True or False")
                if value:
                    argv.append(flag)
                    shown.append(f"{name}=True")
                continue
            texts: list[str] = []
            # how the call is written back (a report's "reproduce" section): the values as used
            literal: str
            if o["table"]:
                if isinstance(value, dict):
                    if not o["list"]:
                        raise TypeError(f"{self.shown_as}: '{name}' takes one table, not a dict")
                    for key, item in value.items():
                        if isinstance(item, (str, os.PathLike)):
                            raise TypeError(
                                f"{self.shown_as}: '{name}': a file is named after itself; give "
                                f"{name}=[..., {os.fspath(item)!r}] or name a DataFrame of it"
                            )
                        texts.append(self._table(name, item, f"DataFrame '{key}'", str(key), tables))
                    literal = "{" + ", ".join(f"{k!r}: <{type(v).__name__}>" for k, v in value.items()) + "}"
                else:
                    # a Series where a table goes is a one-column table, not a list of values
                    one = _is_table(value) or isinstance(value, _pandas_series_type())
                    items = None if one else _list_like(value, name, quiet=True)
                    if items is not None and not o["list"]:
                        raise TypeError(f"{self.shown_as}: '{name}' takes one table, not a list")
                    if items is None:
                        texts.append(self._table(name, value, f"DataFrame '{name}'", name, tables))
                        literal = _table_literal(value, texts[-1])
                    else:
                        for i, item in enumerate(items):
                            label, short = (
                                (f"DataFrame '{name}'", name)
                                if len(items) == 1
                                else (f"DataFrame '{name}[{i}]'", f"{name} {i + 1}")
                            )
                            texts.append(self._table(name, item, label, short, tables))
                        literal = "[" + ", ".join(_table_literal(v, t) for v, t in zip(items, texts)) + "]"
            else:
                items = _list_like(value, name)
                if items is not None and not o["list"]:
                    raise TypeError(f"{self.shown_as}: '{name}' takes one value, not a list")
                if items is None and (_is_table(value) or isinstance(value, dict)):
                    raise TypeError(
                        f"{self.shown_as}: '{name}' takes {'a list' if o['list'] else 'a value'}, "
                        f"not a {type(value).__name__}"
                    )
                shown_items = []
                for item in items if items is not None else [value]:
                    text = _text(item, name)
                    if o["delimited"] and "," in text:
                        raise OptionError(
                            f"{self.shown_as}: '{name}': {text!r} holds a comma, which separates a list's "
                            "items; rename the column (or unit) without one"
                        )
                    texts.append(text)
                    is_number = isinstance(item, numbers.Real) and not isinstance(item, (bool, str))
                    shown_items.append(text if is_number else repr(text))
                literal = "[" + ", ".join(shown_items) + "]" if items is not None else shown_items[0]
            if flag is None:
                # the one positional value; a path beginning with '-' must not read as a flag
                argv += [f"./{t}" if t.startswith("-") else t for t in texts]
            else:
                # --flag=value: a value beginning with '-' is a value, not a flag
                argv += [f"{flag}={t}" for t in texts]
            # a table as the first argument reads as the variable holding it
            shown.append(name if name == self.first and literal.startswith("<") else f"{name}={literal}")
        call = f"aftercast.{self.name}({', '.join(self.lead + shown)})"
        try:
            native = _native.run(argv, tables)
        except Error as e:
            said = self.python_words(str(e))
            # arguments required only in some combinations (compare) are missed by the flag parser
            lead = "the following required arguments were not provided: "
            if said.startswith(lead):
                raise TypeError(f"{self.shown_as} missing required argument(s): {said[len(lead):]}") from None
            raise type(e)(said) from None
        time = kwargs.get("time")
        return Result(native, call, time if isinstance(time, str) else None, self.python_words)


def _a(kind: str) -> str:
    """A type's name with its article: "an int", "a list"."""
    if kind == "ndarray":
        return "a NumPy array"
    return ("an " if kind[:1].lower() in "aeiou" else "a ") + kind


def _table_literal(value: Any, text: str) -> str:
    """A table argument as a call shows it: a path as text, a table as <DataFrame>."""
    if isinstance(value, (str, os.PathLike)):
        return repr(text)
    return f"<{type(value).__name__}>"


def _pandas_series_type() -> tuple:
    """pandas' Series, when pandas is loaded (a Series is a one-column table where a table is asked)."""
    import sys

    pd = sys.modules.get("pandas")
    return (pd.Series,) if pd is not None else ()


def _function(verb: _Verb) -> Callable[..., Result]:
    def analysis(*args: Any, **kwargs: Any) -> Result:
        return verb(args, kwargs)

    analysis.__name__ = analysis.__qualname__ = verb.name if not verb.lead else f"plan_{verb.path[-1]}"
    analysis.__module__ = "aftercast"
    analysis.__signature__ = verb.signature()  # type: ignore[attr-defined]
    analysis.__doc__ = verb.docstring()
    return analysis


forecast = _function(
    _Verb(
        "forecast",
        ["forecast"],
        "data",
        "Counterfactual of one series from its own past and control series (seasonal forecast).",
    )
)
synthetic = _function(
    _Verb(
        "synthetic",
        ["synthetic"],
        "data",
        "Synthetic control: a weighted mix of untouched units as the counterfactual of treated units.",
    )
)
match = _function(
    _Verb(
        "match",
        ["match"],
        "data",
        "Propensity-score matching and weighting on a unit table (changes units opted into).",
    )
)
rollout = _function(
    _Verb(
        "rollout",
        ["rollout"],
        "data",
        "A change adopted in waves: group-time effects, imputation, synthetic difference-in-differences per wave.",
    )
)
compare = _function(
    _Verb(
        "compare",
        ["compare"],
        "experiment",
        "Observational estimates against a randomized experiment's answer (or a plasmode simulation).",
    )
)

_PLAN_KINDS = ("forecast", "synthetic", "match")
_PLAN_VERBS = {
    kind: _Verb(
        "plan",
        ["plan", kind],
        "data",
        f"How long to wait (or how many units to have) to see a change of a given size, from placebo "
        f"runs of the {kind} analysis's own set-up: {kind}()'s arguments and the plan's own.",
        lead=repr(kind),
    )
    for kind in _PLAN_KINDS
}
_PLANS = {kind: _function(verb) for kind, verb in _PLAN_VERBS.items()}


def _unknown_kind(kind: Any) -> OptionError:
    return OptionError(f"plan: the kind is one of {', '.join(map(repr, _PLAN_KINDS))}, not {kind!r}")


def plan(kind: str, data: Any = None, /, **options: Any) -> Result:
    if kind not in _PLANS:
        raise _unknown_kind(kind)
    args = () if data is None else (data,)
    return _PLANS[kind](*args, **options)


def _plan_doc() -> str:
    """plan's help: what it does, then per kind the plan's own arguments (the analysis's are
    that function's; ``help(aftercast.plan_options(kind))`` shows all of them)."""
    analyses = {"forecast": forecast, "synthetic": synthetic, "match": match}
    lines = [
        "How long to wait (or how many units to have) to see a change of a given size: placebo",
        "runs of an analysis's own set-up, with no effect and with each planned lift added.",
        "",
        "``plan(kind, data, **arguments)``: ``kind`` is 'forecast', 'synthetic' or 'match'; the",
        "arguments are that analysis's (see its help) and the plan's own, listed here. The full",
        "signature of one kind: ``help(aftercast.plan_options(kind))``.",
    ]
    for kind, verb in _PLAN_VERBS.items():
        own = set(inspect.signature(analyses[kind]).parameters)
        lines += ["", f"plan({kind!r}, ...): the arguments of {kind}() and these", "-" * 50]
        doc = verb.parameters_doc()
        for head, body in zip(doc[::2], doc[1::2]):
            if head.split(" ")[0] not in own:
                lines += [head, body]
    return "\n".join(lines)


plan.__doc__ = _plan_doc()


def plan_options(kind: str) -> Callable[..., Result]:
    """The plan of one kind as a function with its full signature and help:
    ``aftercast.plan_options('match')(units, treatment=..., ...)`` is ``aftercast.plan('match', units, ...)``."""
    if kind not in _PLANS:
        raise _unknown_kind(kind)
    return _PLANS[kind]
