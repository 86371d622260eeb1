"""The Python package against the command line it wraps, on the demo data.

Run by .ci/run after `maturin develop` (see DEVELOPERS.md); needs the `aftercast` binary of the
same build (AFTERCAST_BIN, or target/debug/aftercast under CARGO_TARGET_DIR or the workspace).
"""

from __future__ import annotations

import html.parser
import json
import os
import pathlib
import re
import signal
import subprocess
import threading
import time

import numpy as np
import pandas as pd
import pyarrow as pa
import pytest

import aftercast as ac

ROOT = pathlib.Path(__file__).resolve().parents[3]
DEMO = ROOT / "demo-data"


def binary() -> str:
    given = os.environ.get("AFTERCAST_BIN")
    if given:
        return given
    target = pathlib.Path(os.environ.get("CARGO_TARGET_DIR", ROOT / "target"))
    path = target / "debug" / "aftercast"
    assert path.exists(), f"build the command line first (cargo build): {path} is missing"
    return str(path)


def cli(args: list[str], tmp_path: pathlib.Path) -> dict:
    out = tmp_path / "cli.json"
    done = subprocess.run([binary(), *args, "--json", str(out), "--quiet"], capture_output=True, text=True, cwd=DEMO)
    assert done.returncode == 0, done.stderr
    return json.loads(out.read_text())


def equal_but_inputs(result: ac.Result, cli_doc: dict) -> None:
    """The result document equals the command line's except where it names its inputs: a
    DataFrame is named and fingerprinted as one (docs/python.md), with the same row count."""
    mine = json.loads(result.to_json())
    assert [i["rows"] for i in mine["inputs"]] == [i["rows"] for i in cli_doc["inputs"]]
    mine.pop("inputs")
    theirs = dict(cli_doc)
    theirs.pop("inputs")
    assert mine == theirs


def read(name: str, **kw) -> pd.DataFrame:
    return pd.read_csv(DEMO / name, **kw)


DAILY_ARGS = dict(
    time="date",
    outcome="app_orders",
    start="2026-03-02",
    controls=["catalogue_orders", "weather_index"],
    log=True,
    log_controls=["catalogue_orders"],
    draws=300,
    outcome_unit="orders",
)
DAILY_FLAGS = [
    "--time", "date", "--outcome", "app_orders", "--start", "2026-03-02",
    "--controls", "catalogue_orders,weather_index", "--log", "--log-controls", "catalogue_orders",
    "--draws", "300", "--outcome-unit", "orders",
]  # fmt: skip

MEMBERS_ARGS = dict(
    treatment="joined",
    outcome="spend_90d",
    covariates=["spend_pre", "visits_pre", "tenure_months"],
    categorical=["region", "age_band"],
    method="ipw",
    draws=200,
)
MEMBERS_FLAGS = [
    "--treatment", "joined", "--outcome", "spend_90d", "--covariates", "spend_pre,visits_pre,tenure_months",
    "--categorical", "region,age_band", "--method", "ipw", "--draws", "200",
]  # fmt: skip

SALE_ARGS = dict(
    unit="region",
    time="week",
    outcome="revenue",
    treated=["Elderhope", "Fernbury", "Highcrag", "Marrowdale", "Redtarn", "Wrenfield"],
    start="2026-04-06",
    end="2026-05-11",
    draws=300,
)
SALE_FLAGS = [
    "--unit", "region", "--time", "week", "--outcome", "revenue",
    "--treated", "Elderhope,Fernbury,Highcrag,Marrowdale,Redtarn,Wrenfield",
    "--start", "2026-04-06", "--end", "2026-05-11", "--draws", "300",
]  # fmt: skip


@pytest.fixture(scope="module")
def forecast_result() -> ac.Result:
    return ac.forecast(read("app_daily.csv"), events=read("calendar.csv"), **DAILY_ARGS)


# --- each verb equals the command line -------------------------------------------------------


def test_forecast_equals_the_command_line(forecast_result, tmp_path):
    doc = cli(["forecast", "--data", "app_daily.csv", "--events", "calendar.csv", *DAILY_FLAGS], tmp_path)
    equal_but_inputs(forecast_result, doc)


def test_synthetic_equals_the_command_line(tmp_path):
    r = ac.synthetic(read("regions_weekly.csv"), method="sdid", **SALE_ARGS)
    equal_but_inputs(r, cli(["synthetic", "--data", "regions_weekly.csv", "--method", "sdid", *SALE_FLAGS], tmp_path))


def test_match_equals_the_command_line(tmp_path):
    r = ac.match(read("members.csv"), **MEMBERS_ARGS)
    equal_but_inputs(r, cli(["match", "--data", "members.csv", *MEMBERS_FLAGS], tmp_path))


def test_rollout_equals_the_command_line_with_two_tables(tmp_path):
    r = ac.rollout(
        read("price_waves.csv"),
        starts=read("price_waves_starts.csv"),
        unit="region",
        time="week",
        outcome="orders",
        method="imputation",
        draws=200,
    )
    doc = cli(
        ["rollout", "--data", "price_waves.csv", "--starts", "price_waves_starts.csv", "--unit", "region",
         "--time", "week", "--outcome", "orders", "--method", "imputation", "--draws", "200"],
        tmp_path,
    )  # fmt: skip
    equal_but_inputs(r, doc)
    assert "event time" in " ".join(r.breakdowns) or r.breakdowns, "a rollout has its event-time breakdown"


def test_compare_equals_the_command_line(tmp_path):
    r = ac.compare(
        read("past_test/experiment.csv"),
        pool=[read("past_test/pool.csv")],
        arm="arm",
        outcome="spend_90d",
        covariates=["spend_pre", "visits_pre", "tenure_months"],
        methods=["naive", "ipw", "aipw"],
        draws=200,
    )
    doc = cli(
        ["compare", "--experiment", "past_test/experiment.csv", "--pool", "past_test/pool.csv", "--arm", "arm",
         "--outcome", "spend_90d", "--covariates", "spend_pre,visits_pre,tenure_months",
         "--methods", "naive,ipw,aipw", "--draws", "200"],
        tmp_path,
    )  # fmt: skip
    equal_but_inputs(r, doc)
    rows = r.estimates
    assert len(rows) == 3 and rows["method"][0] == "naive" and set(rows["setting"]) == {"pool"}
    assert {"estimate", "hdi_lower", "bias", "covers_truth"} <= set(rows.columns)
    # pools given by name are named so in the result
    named = ac.compare(
        read("past_test/experiment.csv"),
        pool={"win-back pool": read("past_test/pool.csv")},
        arm="arm",
        outcome="spend_90d",
        covariates=["spend_pre", "visits_pre", "tenure_months"],
        methods=["naive"],
        draws=50,
    )
    assert set(named.estimates["setting"]) == {"win-back pool"}


def test_plan_equals_the_command_line(tmp_path):
    r = ac.plan("synthetic", read("regions_weekly.csv"), placebos=4, **SALE_ARGS)
    doc = cli(["plan", "synthetic", "--data", "regions_weekly.csv", "--placebos", "4", *SALE_FLAGS], tmp_path)
    equal_but_inputs(r, doc)
    plan = r.planning
    assert {"wait", "lift", "power"} <= set(plan["power"].columns) and plan["answer"]


# --- inputs -----------------------------------------------------------------------------------


def test_pandas_and_pyarrow_give_identical_results(forecast_result):
    daily, calendar = pa.Table.from_pandas(read("app_daily.csv")), pa.Table.from_pandas(read("calendar.csv"))
    r = ac.forecast(daily, events=calendar, **DAILY_ARGS)
    assert r.to_json() == forecast_result.to_json()


def test_pyarrow_table_gives_the_same_as_pandas():
    members = read("members.csv")
    a = ac.match(members, **MEMBERS_ARGS)
    b = ac.match(pa.Table.from_pandas(members), **MEMBERS_ARGS)
    assert a.to_json() == b.to_json()


def test_polars_gives_the_same_as_pandas():
    pl = pytest.importorskip("polars")
    members = read("members.csv")
    a = ac.match(members, **MEMBERS_ARGS)
    b = ac.match(pl.from_pandas(members), **MEMBERS_ARGS)
    assert a.to_json() == b.to_json()


def test_dates_as_datetimes_or_a_named_index_read_as_the_text_dates(forecast_result):
    parsed = read("app_daily.csv", parse_dates=["date"])
    assert ac.forecast(parsed, events=read("calendar.csv"), **DAILY_ARGS).to_json() == forecast_result.to_json()
    indexed = read("app_daily.csv").set_index("date")
    assert ac.forecast(indexed, events=read("calendar.csv"), **DAILY_ARGS).to_json() == forecast_result.to_json()
    stamp = dict(DAILY_ARGS, start=pd.Timestamp("2026-03-02"))
    assert ac.forecast(read("app_daily.csv"), events=read("calendar.csv"), **stamp).to_json() == forecast_result.to_json()


def test_a_file_path_reads_as_the_command_line_reads_it(tmp_path):
    r = ac.match(str(DEMO / "members.csv"), **MEMBERS_ARGS)
    assert json.loads(r.to_json())["inputs"][0]["path"].endswith("members.csv")
    assert r.to_json() == ac.match(DEMO / "members.csv", **MEMBERS_ARGS).to_json()


def test_any_list_like_is_a_list(tmp_path):
    members = read("members.csv")
    covariates = MEMBERS_ARGS["covariates"]
    want = ac.match(members, **MEMBERS_ARGS).to_json()
    given = [
        tuple(covariates),
        pd.Series(covariates),
        pd.Index(covariates),
        members.columns[[members.columns.get_loc(c) for c in covariates]],
        np.array(covariates),
        pa.array(covariates),
        pa.chunked_array([covariates]),
        pd.Series(covariates, dtype="string"),
        (c for c in covariates),
    ]
    for cov in given:
        assert ac.match(members, **dict(MEMBERS_ARGS, covariates=cov)).to_json() == want, type(cov)
    # a set has no order: its items are taken sorted, as written out in that order
    in_order = dict(MEMBERS_ARGS, covariates=sorted(covariates))
    assert ac.match(members, **dict(MEMBERS_ARGS, covariates=set(covariates))).to_json() == ac.match(members, **in_order).to_json()
    with pytest.raises(TypeError, match="one-dimensional"):
        ac.match(members, **dict(MEMBERS_ARGS, covariates=np.array([covariates, covariates])))
    with pytest.raises(TypeError, match="'covariates' takes a list, not a DataFrame"):
        ac.match(members, **dict(MEMBERS_ARGS, covariates=members[covariates]))


def test_a_value_beginning_with_a_dash_is_a_value():
    members = read("members.csv").rename(columns={"spend_pre": "-spend_pre"})
    covariates = ["-spend_pre", "visits_pre", "tenure_months"]
    r = ac.match(members, **dict(MEMBERS_ARGS, covariates=covariates))
    plain = ac.match(read("members.csv"), **MEMBERS_ARGS)
    assert r.estimate == plain.estimate
    # and a negative lift of a plan is a number, not a flag
    plan = ac.plan("match", read("members.csv"), **MEMBERS_ARGS, lifts=[-5], placebos=10, sizes=[400], run_draws=50)
    assert plan.planning["power"]["lift"].tolist() == [-0.05]
    assert not [w for w in plan.warnings if "failed" in w], plan.warnings
    # the warnings name arguments, not flags
    assert all("--" not in w for w in plan.warnings) and any("('level')" in w for w in plan.warnings)


def test_a_comma_in_a_list_item_is_refused_not_split():
    with pytest.raises(ac.OptionError, match=r"'covariates': 'spend_pre,visits_pre' holds a comma"):
        ac.match(read("members.csv"), **dict(MEMBERS_ARGS, covariates=["spend_pre,visits_pre"]))


def test_zoned_dates_periods_and_numpy_dates_read_as_their_days(forecast_result):
    calendar = read("calendar.csv")
    want = forecast_result.to_json()
    doc = json.loads(want)
    for zone in ("Europe/Berlin", "America/New_York", "Asia/Kolkata"):
        zoned = read("app_daily.csv")
        zoned["date"] = pd.to_datetime(zoned["date"]).dt.tz_localize(zone)
        start = pd.Timestamp("2026-03-02", tz=zone)
        # the same answer; the fingerprint is of the cells as read, which carry the zone
        equal_but_inputs(ac.forecast(zoned, events=calendar, **dict(DAILY_ARGS, start=start)), doc)
        # the same instants as a pyarrow table keep their zone
        equal_but_inputs(ac.forecast(pa.Table.from_pandas(zoned), events=calendar, **DAILY_ARGS), doc)
    periods = read("app_daily.csv")
    periods["date"] = pd.PeriodIndex(periods["date"], freq="D")
    start = pd.Period("2026-03-02", freq="D")
    assert ac.forecast(periods, events=calendar, **dict(DAILY_ARGS, start=start)).to_json() == want
    indexed = periods.set_index("date")
    assert ac.forecast(indexed, events=calendar, **DAILY_ARGS).to_json() == want
    numpy_start = dict(DAILY_ARGS, start=np.datetime64("2026-03-02"))
    assert ac.forecast(read("app_daily.csv"), events=calendar, **numpy_start).to_json() == want


def test_a_missing_date_is_named_as_missing():
    daily = read("app_daily.csv", parse_dates=["date"])
    daily.loc[5, "date"] = pd.NaT
    with pytest.raises(ac.DataError, match=r"row 5, column 1 \('date'\): the date is missing"):
        ac.forecast(daily, **DAILY_ARGS)
    with pytest.raises(ac.OptionError, match="'start' is missing"):
        ac.forecast(read("app_daily.csv"), **dict(DAILY_ARGS, start=pd.NaT))


# --- errors -----------------------------------------------------------------------------------


def test_a_bad_column_raises_data_error_naming_it():
    with pytest.raises(ac.DataError, match=r"DataFrame 'data': no column named 'spend_90'"):
        ac.match(read("members.csv"), **dict(MEMBERS_ARGS, outcome="spend_90"))


def with_cell(frame: pd.DataFrame, row: int, column: str, text: str) -> pd.DataFrame:
    """The frame with one cell of a numeric column replaced by text (as a messy file has)."""
    out = frame.copy()
    out[column] = out[column].astype(object)
    out.loc[row, column] = text
    return out


def test_a_bad_cell_names_its_row_and_column():
    members = with_cell(read("members.csv"), 17, "spend_pre", "n/a?")
    with pytest.raises(ac.DataError, match=r"DataFrame 'data', row 17, column 3 \('spend_pre'\): 'n/a\?' is not a number"):
        ac.match(members, **MEMBERS_ARGS)


def test_the_second_table_is_named_in_its_errors():
    starts = read("price_waves_starts.csv").rename(columns={"start": "begins"})
    with pytest.raises(ac.DataError, match=r"DataFrame 'starts'"):
        ac.rollout(read("price_waves.csv"), starts=starts, unit="region", time="week", outcome="orders", draws=50)


def test_option_errors_name_the_python_argument():
    with pytest.raises(ac.OptionError, match=r"'level'.*between 0 and 1"):
        ac.match(read("members.csv"), **dict(MEMBERS_ARGS, level=2))
    with pytest.raises(ac.DataError, match=r"'method'"):
        ac.match(read("members.csv"), **dict(MEMBERS_ARGS, method="bogus"))


def test_unknown_and_missing_arguments_are_type_errors():
    with pytest.raises(TypeError, match="unexpected keyword argument 'bogus'"):
        ac.match(read("members.csv"), bogus=1, **MEMBERS_ARGS)
    with pytest.raises(TypeError, match="missing required argument.*'treatment'"):
        ac.match(read("members.csv"), outcome="spend_90d")
    with pytest.raises(TypeError, match="one value, not a list"):
        ac.match(read("members.csv"), **dict(MEMBERS_ARGS, method=["ipw", "aipw"]))


def test_the_options_are_the_command_lines():
    import inspect

    params = inspect.signature(ac.forecast).parameters
    assert params["model"].default == "structural"
    assert params["folds"].default == 3
    assert params["level"].default == 0.9
    assert "json" not in params and "quiet" not in params
    assert "trend" in ac.forecast.__doc__


def test_tables_pyarrow_cannot_take_raise_data_error_naming_the_argument():
    members = read("members.csv")
    twice = members.rename(columns={"visits_pre": "spend_pre"})
    with pytest.raises(ac.DataError, match=r"DataFrame 'data': .*column 'spend_pre' appears more than once"):
        ac.match(twice, **MEMBERS_ARGS)
    odd = members.assign(z=np.full(len(members), 1 + 2j))
    with pytest.raises(ac.DataError, match=r"DataFrame 'data': cannot be read as a table \(.*column z"):
        ac.match(odd, **MEMBERS_ARGS)


def test_table_arguments_say_what_they_take():
    members = read("members.csv")
    with pytest.raises(TypeError, match=r"match\(\): 'data' takes one table, not a dict"):
        ac.match({"a": members}, **MEMBERS_ARGS)
    with pytest.raises(TypeError, match=r"'data' takes a DataFrame, a pyarrow Table or a file path, not an int"):
        ac.match(5, **MEMBERS_ARGS)
    with pytest.raises(TypeError, match=r"'pool': a file is named after itself"):
        ac.compare(DEMO / "past_test" / "experiment.csv", pool={"p": "x.csv"}, outcome="y")
    with pytest.raises(ac.OptionError, match=r"'threads'"):
        ac.match(members, **MEMBERS_ARGS, threads=-1)
    with pytest.raises(ac.OptionError, match=r"'threads'"):
        ac.match(members, **MEMBERS_ARGS, threads="x")


def test_messages_and_help_speak_python():
    # a flag with its value in a message is the argument with its value
    verb = ac._verbs._PLAN_VERBS["forecast"]
    said = verb.python_words("under --model auto, --min-train or --waits; use --missing drop-row with --log")
    assert said == "under model='auto', 'min_train' or 'waits'; use missing='drop-row' with log=True"
    doc = ac.forecast.__doc__
    assert not re.search(r"--[a-z]", doc) and "comma-separated" not in doc
    assert "model='auto' needs at least 1" in doc
    # the plan's help lists each kind's own arguments; plan_options gives the whole signature
    assert "plan('match', ...)" in ac.plan.__doc__ and "run_draws" in ac.plan.__doc__
    import inspect

    assert {"sizes", "run_draws", "treatment"} <= set(inspect.signature(ac.plan_options("match")).parameters)
    with pytest.raises(TypeError, match=r"plan\('match'\) got an unexpected keyword argument 'waits'"):
        ac.plan("match", read("members.csv"), waits=[4], **MEMBERS_ARGS)
    with pytest.raises(ac.OptionError, match="the kind is one of"):
        ac.plan("bogus", read("members.csv"))


def test_the_users_own_text_is_never_rewritten():
    members = read("members.csv").rename(columns={"spend_pre": "--level"})
    with pytest.raises(ac.DataError, match=r"no column named '--outcome'"):
        ac.match(members, **dict(MEMBERS_ARGS, outcome="--outcome"))
    regions = read("regions_weekly.csv")
    with pytest.raises(ac.DataError, match=r"treated unit '--level' is not"):
        ac.synthetic(regions, **dict(SALE_ARGS, treated=["--level"]))
    cells = with_cell(read("members.csv"), 3, "spend_pre", "--missing")
    with pytest.raises(ac.DataError, match=r"'--missing' is not a number"):
        ac.match(cells, **MEMBERS_ARGS)


def test_more_list_likes_and_whole_floats():
    regions = read("regions_weekly.csv")
    treated = SALE_ARGS["treated"]
    want = ac.synthetic(regions, **SALE_ARGS).to_json()
    picked = regions.loc[regions["region"].isin(treated), "region"]
    for given in (
        picked.unique(),  # an extension array in recent pandas
        picked.astype("category").unique(),
        pd.array(treated),
        map(str, treated),
        iter(treated),
    ):
        assert ac.synthetic(regions, **dict(SALE_ARGS, treated=given)).to_json() == want, type(given)
    # draws=3e2 is 300 draws
    assert ac.synthetic(regions, **dict(SALE_ARGS, draws=3e2)).to_json() == want
    with pytest.raises(ac.OptionError, match=r"'draws'.*not a whole number"):
        ac.synthetic(regions, **dict(SALE_ARGS, draws=-5))


def test_a_series_is_a_one_column_table_where_a_table_goes():
    regions = read("regions_weekly.csv")
    with pytest.raises(ac.DataError, match=r"DataFrame 'data': no column named 'region'"):
        ac.synthetic(regions["revenue"], **SALE_ARGS)
    with pytest.raises(TypeError, match=r"'data' takes a DataFrame, a pyarrow Table or a file path, not a NumPy array"):
        ac.synthetic(regions.to_numpy(), **SALE_ARGS)


def test_arguments_required_together_are_type_errors():
    with pytest.raises(TypeError, match=r"compare\(\) missing required argument\(s\): .*'outcome'"):
        ac.compare(read("past_test/experiment.csv"), pool=[read("past_test/pool.csv")])


def test_plan_messages_name_the_plan_as_called():
    regions = read("regions_weekly.csv")
    with pytest.raises(ac.DataError, match=r"^plan\('synthetic'\): "):
        ac.plan("synthetic", regions, **dict(SALE_ARGS, draws=100), placebos=4, waits=[500])


def test_card_report_and_call_speak_python(tmp_path):
    members = read("members.csv")
    r = ac.match(
        members.head(3000),
        **dict(MEMBERS_ARGS, method="nearest", draws=100, categorical=["region"], level=np.float64(0.8)),
    )
    flagged = [w for w in r._doc["warnings"] if re.search(r"--[a-z]", w)]
    assert flagged, "the check needs a warning that names a flag"
    card = r._repr_html_()
    page = r.report(tmp_path / "r.html").read_text()
    for html_text in (card, page):
        prose = re.sub(r"<style\b.*?</style>|<svg\b.*?</svg>", "", html_text, flags=re.S)
        assert not re.search(r"--[a-z]", prose), re.search(r".{40}--[a-z].{40}", prose)
    # the call to reproduce it holds the values as used, ready to paste
    assert "level=0.8" in page and "categorical=[&#39;region&#39;]" in page
    with pytest.raises(ac.DataError, match="is an input of this analysis"):
        ac.match(DEMO / "members.csv", **dict(MEMBERS_ARGS, draws=50)).report(DEMO / "members.csv")
    assert (DEMO / "members.csv").read_text().startswith("customer_id")


# --- the result object ------------------------------------------------------------------------


def test_estimate_interval_and_verdict_are_the_documents(forecast_result):
    doc = forecast_result.result
    q = doc["judged_on"]["quantity"]
    assert forecast_result.quantity == q
    assert forecast_result.estimate == doc["effect"][q]["estimate"]
    assert forecast_result.interval == (doc["effect"][q]["hdi_lower"], doc["effect"][q]["hdi_upper"])
    assert forecast_result.verdict == doc["verdict"]
    summary = forecast_result.summary()
    assert summary.loc[q, "estimate"] == forecast_result.estimate
    assert set(summary.index) == set(doc["effect"])


def test_draws_are_a_float64_array_of_the_judged_quantity(forecast_result):
    d = forecast_result.draws
    assert isinstance(d, np.ndarray)
    assert d.dtype == np.float64 and d.shape == (300,)
    assert not d.flags.writeable
    # the draws behind the summary: their mean is the summary's mean
    assert np.mean(d) == pytest.approx(forecast_result.summary().loc[forecast_result.quantity, "mean"], rel=1e-12)
    table = forecast_result.draws_table()
    assert table.shape == (300, len(table.columns)) and np.array_equal(table[forecast_result.quantity], d)


def test_path_is_indexed_by_date_with_the_counterfactual(forecast_result):
    path = forecast_result.path()
    assert isinstance(path.index, pd.DatetimeIndex)
    post = path[path["post"]]
    assert post.index[0] == pd.Timestamp("2026-03-02")
    assert path.index.name == "date"  # the time column's name
    assert {"observed", "counterfactual", "lower", "upper", "effect", "effect_hdi_lower"} <= set(path.columns)


def test_a_unit_method_has_no_path():
    with pytest.raises(ValueError, match="no path"):
        ac.match(read("members.csv"), **MEMBERS_ARGS).path()


def test_diagnostics_and_warnings_are_plain_python(forecast_result):
    assert isinstance(forecast_result.diagnostics, dict) and forecast_result.diagnostics
    json.dumps(forecast_result.diagnostics)
    assert isinstance(forecast_result.warnings, list)
    assert forecast_result.assumptions


class _Balance(html.parser.HTMLParser):
    VOID = {"br", "img", "meta", "hr", "input", "link", "wbr", "col", "source"}

    def __init__(self):
        super().__init__()
        self.stack: list[str] = []
        self.svg = 0

    def handle_starttag(self, tag, attrs):
        if tag == "svg":
            self.svg += 1
        if tag not in self.VOID:
            self.stack.append(tag)

    def handle_startendtag(self, tag, attrs):
        pass

    def handle_endtag(self, tag):
        assert self.stack and self.stack[-1] == tag, f"</{tag}> closes <{self.stack[-1] if self.stack else None}>"
        self.stack.pop()


def test_repr_html_is_well_formed_with_an_inline_svg(forecast_result):
    page = forecast_result._repr_html_()
    checker = _Balance()
    checker.feed(page)
    checker.close()
    assert checker.stack == [], f"unclosed: {checker.stack}"
    assert checker.svg >= 1
    assert "<script" not in page
    assert f"{forecast_result.estimate * 100:+.2f}%" in page
    # its styles apply to the cell alone
    assert ".aftercast-cell h3" in page and "\nbody{" not in page


def test_report_is_the_command_lines_page_with_the_call_to_reproduce(forecast_result, tmp_path):
    out = forecast_result.report(tmp_path / "app.html")
    text = out.read_text()
    assert text.startswith("<!DOCTYPE html>")
    assert "aftercast.forecast(data, " in text and "time=&#39;date&#39;" in text or "time='date'" in text
    assert text == forecast_result.report_html()


def test_repr_is_the_terminal_summary(forecast_result):
    assert repr(forecast_result).startswith("aftercast forecast (structural):")


# --- running ----------------------------------------------------------------------------------


def test_thread_count_does_not_change_the_answer():
    members = read("members.csv")
    assert ac.match(members, threads=1, **MEMBERS_ARGS).to_json() == ac.match(members, **MEMBERS_ARGS).to_json()


def test_the_interpreter_is_free_while_a_fit_runs():
    ticks = []
    running = threading.Event()

    def tick():
        running.wait()
        while running.is_set():
            ticks.append(1)
            time.sleep(0.01)

    t = threading.Thread(target=tick)
    t.start()
    running.set()
    try:
        ac.match(read("members.csv"), **dict(MEMBERS_ARGS, draws=600))
    finally:
        running.clear()
        t.join()
    # with the interpreter held for the fit the other thread could not have ticked at all
    assert len(ticks) >= 5


def test_two_threads_at_once_get_the_answers_they_would_get_alone():
    members = read("members.csv")
    alone = ac.match(members, **MEMBERS_ARGS).to_json()
    other = ac.match(members, **dict(MEMBERS_ARGS, method="aipw")).to_json()
    got: dict = {}

    def one(key, method):
        got[key] = ac.match(members, **dict(MEMBERS_ARGS, method=method)).to_json()

    threads = [threading.Thread(target=one, args=("ipw", "ipw")), threading.Thread(target=one, args=("aipw", "aipw"))]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert got == {"ipw": alone, "aipw": other}


def test_keyboard_interrupt_stops_a_long_run_and_the_next_run_is_whole():
    members = read("members.csv")
    main = threading.get_ident()
    timer = threading.Timer(1.0, lambda: signal.pthread_kill(main, signal.SIGINT))
    timer.start()
    try:
        with pytest.raises(KeyboardInterrupt):
            # minutes of bootstrap refits when not stopped
            ac.match(members, **dict(MEMBERS_ARGS, draws=100_000))
    finally:
        timer.cancel()
    again = ac.match(members, **MEMBERS_ARGS)
    assert again.to_json() == ac.match(pa.Table.from_pandas(members), **MEMBERS_ARGS).to_json()
