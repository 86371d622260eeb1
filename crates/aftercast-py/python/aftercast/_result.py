"""The answer of one analysis, as a notebook uses it. Every number comes from the result
document the command line writes (``to_json()`` is that document, byte for byte); this module
only arranges it into Python and pandas objects."""

from __future__ import annotations

import json
import os
import pathlib
import re
from typing import Any, Optional, Tuple

_ISO_DATE = re.compile(r"^\d{4}-\d{2}-\d{2}$")


class Result:
    """The answer of one analysis.

    ``estimate``, ``interval`` and ``verdict`` are stated on the quantity the verdict is judged
    on (``quantity``: the average effect, or the relative effect for a region of practical
    equivalence in percent). ``summary()`` has every quantity; ``draws`` the draws behind them.
    """

    def __init__(self, native: Any, call: str, time: Optional[str] = None, words: Any = None):
        self._native = native
        self._call = call
        self._time = time
        # the command line's flags in a sentence as the function's arguments
        self._words = words or (lambda text: text)
        self._doc = json.loads(native.json())

    # --- the answer -----------------------------------------------------------------------
    @property
    def result(self) -> dict:
        """The whole result document (as result.json holds it)."""
        return json.loads(self._native.json())

    @property
    def verb(self) -> str:
        return self._doc["verb"]

    @property
    def method(self) -> str:
        return self._doc["method"]

    @property
    def headline(self) -> str:
        """One line saying what was estimated on what."""
        return self._native.headline

    @property
    def level(self) -> float:
        """The probability level of the intervals."""
        return self._doc["level"]

    @property
    def quantity(self) -> Optional[str]:
        """The quantity the verdict is judged on ("average" or "relative"), None for results
        that are not an effect (a comparison summary)."""
        judged = self._doc.get("judged_on")
        return judged.get("quantity") if isinstance(judged, dict) else None

    def _judged(self) -> Optional[dict]:
        effect = self._doc.get("effect") or {}
        q = self.quantity
        return effect.get(q) if q else None

    @property
    def estimate(self) -> Optional[float]:
        """The point estimate of the judged quantity."""
        s = self._judged()
        return s["estimate"] if s else None

    @property
    def interval(self) -> Optional[Tuple[float, float]]:
        """The interval the verdict is judged on (highest-density, at ``level``)."""
        s = self._judged()
        if not s:
            return None
        judged = self._doc.get("judged_on") or {}
        if judged.get("interval", "hdi") == "hdi":
            return (s["hdi_lower"], s["hdi_upper"])
        return (s["lower"], s["upper"])

    @property
    def verdict(self) -> Optional[str]:
        """gain, gain-but-small, negligible, loss-but-small, loss or inconclusive."""
        return self._doc.get("verdict")

    @property
    def warnings(self) -> list:
        """What the analysis warns of, naming this function's arguments (``to_json()`` keeps
        the command line's wording)."""
        return [self._words(w) for w in self._doc.get("warnings") or []]

    @property
    def assumptions(self) -> list:
        """What the estimate rests on (no data can prove it)."""
        return list(self._doc.get("assumptions") or [])

    @property
    def diagnostics(self) -> dict:
        """The method's checks (pre-period fit, balance, placebos, ...), as dicts."""
        return json.loads(json.dumps(self._doc.get("diagnostics") or {}))

    # --- tables ---------------------------------------------------------------------------
    def summary(self):
        """One row per quantity (average, cumulative, relative, total): the estimate, the
        posterior or bootstrap mean, median and sd, the equal-tailed and highest-density
        interval ends, and the probability the effect is positive."""
        import pandas as pd

        effect = self._doc.get("effect") or {}
        rows = {q: s for q, s in effect.items() if isinstance(s, dict)}
        frame = pd.DataFrame.from_dict(rows, orient="index")
        frame.index.name = "quantity"
        return frame

    def path(self):
        """Observed and counterfactual per period with the counterfactual's interval, and in
        the post-period the effect and the cumulative effect with their intervals (columns
        ``effect``, ``effect_hdi_lower``, ..., ``cumulative``, ...), indexed by the time column
        (as dates where it holds dates); a series method's answer only."""
        import pandas as pd

        rows = self._doc.get("path")
        if not rows:
            raise ValueError(f"a {self.verb} result has no path over time (it is not a series method)")
        frame = pd.DataFrame([_flat(r) for r in rows])
        if "time" in frame:
            times = frame["time"].astype(str)
            if times.map(lambda t: bool(_ISO_DATE.match(t))).all():
                frame["time"] = pd.to_datetime(times)
            frame = frame.set_index("time")
            # named as the table's time column was
            frame.index.name = self._time or "time"
        return frame

    @property
    def breakdowns(self) -> dict:
        """Effects by event time, wave, segment or placebo date: one DataFrame per breakdown."""
        import pandas as pd

        out = {}
        for b in self._doc.get("breakdowns") or []:
            rows = [_flat(r) for r in b.get("rows", [])]
            out[b.get("by", b.get("title"))] = pd.DataFrame(rows)
        return out

    @property
    def estimates(self):
        """A comparison's rows (compare): each method and setting with its estimate, interval,
        bias against the experiment and whether it reaches the experiment's verdict."""
        import pandas as pd

        rows = self._doc.get("estimates")
        if rows is None:
            raise ValueError(f"a {self.verb} result has no comparison rows (compare has them)")
        return pd.DataFrame([_flat(r) for r in rows])

    @property
    def planning(self) -> dict:
        """A plan's answer: power per wait and lift ("power"), the minimum detectable effect per
        wait ("mde"), the shortest wait per lift ("wait_for") as DataFrames, and the
        false-positive rate, target power and answer sentences as given."""
        import pandas as pd

        plan = self._doc.get("planning")
        if plan is None:
            raise ValueError(f"a {self.verb} result is not a plan (plan has one)")
        out = {}
        for k, v in plan.items():
            if isinstance(v, list) and v and all(isinstance(x, dict) for x in v):
                out[k] = pd.DataFrame([_flat(x) for x in v])
            else:
                out[k] = v
        return out

    @property
    def tables(self) -> list:
        """The verb's own tables (a comparison with an experiment, a plan), as DataFrames with
        the cells as shown in the report."""
        import pandas as pd

        out = []
        for title, headers, rows in self._native.tables():
            frame = pd.DataFrame(rows, columns=headers)
            frame.attrs["title"] = title
            out.append(frame)
        return out

    # --- draws ----------------------------------------------------------------------------
    @property
    def draws(self):
        """The draws of the judged quantity: a read-only float64 NumPy array that owns the
        estimator's buffer (no copy)."""
        q = self.quantity or "average"
        all_draws = dict(self._native.draws())
        if q in all_draws:
            return all_draws[q]
        if all_draws:
            return next(iter(all_draws.values()))
        import numpy as np

        return np.empty(0)

    def draws_table(self):
        """Every quantity's draws, one column each (as draws.parquet holds them)."""
        import pandas as pd

        return pd.DataFrame(dict(self._native.draws()))

    # --- outputs --------------------------------------------------------------------------
    def to_json(self) -> str:
        """The result document exactly as the command line writes result.json."""
        return self._native.json()

    def report(self, path: "str | os.PathLike[str]") -> pathlib.Path:
        """Write the HTML report (one self-contained page, the command line's, in this
        function's words) to ``path`` atomically; returns the path. Never over an input file
        of the analysis."""
        from ._errors import DataError

        p = pathlib.Path(path)
        target = p.resolve()
        for i in self._doc.get("inputs") or []:
            given = pathlib.Path(str(i.get("path", "")))
            if given.exists() and given.resolve() == target:
                raise DataError(f"{p}: is an input of this analysis; write the report elsewhere")
        self._native.write_page(str(p), self.report_html())
        return p

    def report_html(self) -> str:
        """The HTML report as text."""
        return _html_words(self._native.report_html(self._call), self._words)

    def _repr_html_(self) -> str:
        return _html_words(self._native.fragment_html(), self._words)

    def __repr__(self) -> str:
        return self._words(self._native.terminal().rstrip("\n"))


# blocks of a page whose text is not prose: styles (custom properties are written --name),
# charts and scripts
_NOT_PROSE = re.compile(r"(<style\b.*?</style>|<svg\b.*?</svg>|<script\b.*?</script>)", re.S)


def _html_words(page: str, words: Any) -> str:
    """A page with the command line's flags in its prose named as the function's arguments."""
    parts = _NOT_PROSE.split(page)
    return "".join(p if i % 2 else words(p) for i, p in enumerate(parts))


def _flat(row: dict) -> dict:
    """A row with its nested summaries spread into columns: ``effect`` (the estimate),
    ``effect_lower``, ``effect_hdi_upper``, ... ."""
    out = {}
    for k, v in row.items():
        if isinstance(v, dict):
            for kk, vv in v.items():
                if isinstance(vv, (dict, list)):
                    continue
                if k == "summary":
                    out[kk] = vv
                else:
                    out[k if kk == "estimate" else f"{k}_{kk}"] = vv
        elif not isinstance(v, list):
            out[k] = v
    return out
