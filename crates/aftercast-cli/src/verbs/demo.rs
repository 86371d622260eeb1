//! `aftercast demo --out DIR`: write the invented Fernhill Outfitters scenario into DIR/data,
//! a study file DIR/study.toml that analyses it with every verb this build has, and run it.

use crate::common::OutDir;
use aftercast_demo::ScenarioTruth;
use clap::CommandFactory;
use std::fmt::Write as _;

/// Arguments of `demo`.
#[derive(Debug, clap::Args)]
pub struct Args {
    /// Output folder and run options.
    #[command(flatten)]
    pub output: crate::common::StudyOutput,
}

fn has_verb(name: &str) -> bool {
    crate::Cli::command().find_subcommand(name).is_some()
}

fn q(s: &str) -> String {
    format!("\"{}\"", s.replace('\\', "\\\\").replace('"', "\\\""))
}

/// The demo's study file, with every analysis whose verb this build has.
pub fn demo_study(t: &ScenarioTruth) -> String {
    let mut s = String::new();
    let _ = writeln!(s, "# The Fernhill Outfitters demo study (an invented outdoor-gear retailer).");
    let _ = writeln!(s, "# Written by `aftercast demo`; run it again with `aftercast run study.toml --out DIR`.");
    let _ = writeln!(s, "title = \"Fernhill Outfitters: what did this spring's changes do?\"");
    let _ = writeln!(
        s,
        "summary = \"Changes without a holdout: an app feature launched to everyone on {}, a spring sale in {} of 40 regions, a loyalty scheme customers joined by choice, and a footwear price cut that reached the regions in three waves. A past randomized test checks how far the observational methods land from an experiment's answer.\"",
        t.app_launch.launch_date,
        t.regional_sale.sale_regions.len()
    );
    let _ = writeln!(s, "\n[defaults]\nlevel = 0.9\nseed = 20260302\ndraws = 1000\n");
    let _ = writeln!(s, "[questions]");
    let _ = writeln!(s, "app-orders = \"Did the app feature raise daily app orders?\"");
    let _ = writeln!(
        s,
        "regional-sale = \"What did the spring sale add to regional store revenue, net of the dip after?\""
    );
    let _ = writeln!(s, "loyalty = \"How much more do loyalty members spend because of the scheme?\"");
    if has_verb("windows") && has_verb("match") {
        let _ = writeln!(
            s,
            "trail-planner = \"Once the novelty week has passed, did the Trail Planner invitation raise what customers order?\""
        );
    }
    if has_verb("rollout") {
        let _ = writeln!(
            s,
            "price-waves = \"What did the footwear price cut do to weekly orders as it reached the regions in three waves, and does the effect grow?\""
        );
    }
    let _ = writeln!(s);
    if has_verb("forecast") && has_verb("plan") {
        // the plan an analyst makes before the launch: the structural set-up below, placebo
        // dates before 2026-03-02 only
        let _ = writeln!(s, "[[analysis]]\nname = \"app-launch-plan\"\nverb = \"plan forecast\"");
        let _ = writeln!(
            s,
            "describe = \"Before the launch: how long must we wait to see a 2% change in daily app orders? (placebo dates of the structural forecast below)\""
        );
        let _ =
            writeln!(s, "[analysis.flags]\ndata = \"data/app_daily.csv\"\ntime = \"date\"\noutcome = \"app_orders\"");
        let _ = writeln!(s, "controls = \"catalogue_orders,weather_index\"\nevents = \"data/calendar.csv\"");
        let _ = writeln!(
            s,
            "start = {}\nmodel = \"structural\"\nlog = true\nlog_controls = \"catalogue_orders\"\n\n",
            q(&t.app_launch.launch_date)
        );
    }
    if has_verb("forecast") {
        for (name, model) in [("app-launch-structural", "structural"), ("app-launch-harmonic", "harmonic")] {
            let _ = writeln!(s, "[[analysis]]\nname = {}\nquestion = \"app-orders\"\nverb = \"forecast\"", q(name));
            let _ = writeln!(
                s,
                "describe = \"Daily app orders against a {model} forecast from the pre-period and two untouched control series\""
            );
            let _ = writeln!(s, "truth = {}\ntruth_of = \"relative\"", t.app_launch.orders.relative_effect);
            let _ = writeln!(
                s,
                "[analysis.flags]\ndata = \"data/app_daily.csv\"\ntime = \"date\"\noutcome = \"app_orders\""
            );
            let _ = writeln!(s, "controls = \"catalogue_orders,weather_index\"\nevents = \"data/calendar.csv\"");
            let _ = writeln!(
                s,
                "start = {}\nmodel = {}\nlog = true\nlog_controls = \"catalogue_orders\"\noutcome_unit = \"orders\"\n",
                q(&t.app_launch.launch_date),
                q(model)
            );
        }
    }
    if has_verb("synthetic") {
        let r = &t.regional_sale;
        let last = r.pull_forward_weeks.last().cloned().unwrap_or_else(|| r.last_week.clone());
        for method in ["weights", "sdid"] {
            let _ = writeln!(
                s,
                "[[analysis]]\nname = \"regional-sale-{method}\"\nquestion = \"regional-sale\"\nverb = \"synthetic\""
            );
            let _ = writeln!(
                s,
                "describe = \"Weekly revenue of the sale regions against a synthetic control ({method}) of the 34 untouched regions\""
            );
            let _ = writeln!(s, "truth = {}\ntruth_of = \"relative\"", r.relative_net_effect);
            let _ = writeln!(
                s,
                "[analysis.flags]\ndata = \"data/regions_weekly.csv\"\nunit = \"region\"\ntime = \"week\"\noutcome = \"revenue\""
            );
            let _ = writeln!(
                s,
                "treated = {}\nstart = {}\nend = {}\nmethod = \"{method}\"\noutcome_unit = \"$\"\n",
                q(&r.sale_regions.join(",")),
                q(&r.sale_weeks[0]),
                q(&last)
            );
        }
    }
    if has_verb("forecast") {
        // a second, independent family for the sale: the sale regions' summed revenue against a
        // forecast from its own past and the untouched regions' sum
        let r = &t.regional_sale;
        let last = r.pull_forward_weeks.last().cloned().unwrap_or_else(|| r.last_week.clone());
        let _ = writeln!(
            s,
            "[[analysis]]\nname = \"regional-sale-forecast\"\nquestion = \"regional-sale\"\nverb = \"forecast\""
        );
        let _ = writeln!(
            s,
            "describe = \"Summed weekly revenue of the sale regions against a structural forecast with the other regions' sum as control\""
        );
        let _ = writeln!(s, "truth = {}\ntruth_of = \"relative\"", r.relative_net_effect);
        let _ = writeln!(
            s,
            "[analysis.flags]\ndata = \"data/regions_weekly_totals.csv\"\ntime = \"week\"\noutcome = \"sale_regions_revenue\""
        );
        let _ = writeln!(
            s,
            "controls = \"other_regions_revenue\"\nstart = {}\nend = {}\nmodel = \"structural\"\nlog = true\nlog_controls = \"other_regions_revenue\"\noutcome_unit = \"$\"\n",
            q(&r.sale_weeks[0]),
            q(&last)
        );
    }
    if has_verb("match") {
        for method in ["nearest", "ipw", "aipw"] {
            let _ = writeln!(s, "[[analysis]]\nname = \"loyalty-{method}\"\nquestion = \"loyalty\"\nverb = \"match\"");
            let _ = writeln!(s, "describe = \"90-day spend of scheme members against similar non-members ({method})\"");
            let _ = writeln!(s, "truth = {}\ntruth_of = \"average\"", t.loyalty.sample_att);
            let _ = writeln!(
                s,
                "[analysis.flags]\ndata = \"data/members.csv\"\ntreatment = \"joined\"\noutcome = \"spend_90d\""
            );
            let _ =
                writeln!(s, "covariates = \"spend_pre,visits_pre,tenure_months\"\ncategorical = \"region,age_band\"");
            let _ = writeln!(s, "method = \"{method}\"\nestimand = \"att\"\nrope = \"1\"\noutcome_unit = \"$\"\n");
        }
        // for whom: the same weighting fitted within each age band, pooled by treated members
        let _ = writeln!(s, "[[analysis]]\nname = \"loyalty-by-age\"\nquestion = \"loyalty\"\nverb = \"match\"");
        let _ =
            writeln!(s, "describe = \"90-day spend of scheme members by age band (aipw within each band, pooled)\"");
        let _ = writeln!(s, "truth = {}\ntruth_of = \"average\"", t.loyalty.sample_att);
        let _ = writeln!(
            s,
            "[analysis.flags]\ndata = \"data/members.csv\"\ntreatment = \"joined\"\noutcome = \"spend_90d\""
        );
        let _ = writeln!(
            s,
            "covariates = \"spend_pre,visits_pre,tenure_months\"\ncategorical = \"region\"\nby = \"age_band\""
        );
        let _ = writeln!(s, "method = \"aipw\"\nestimand = \"att\"\nrope = \"1\"\noutcome_unit = \"$\"\n");
    }
    if has_verb("windows") && has_verb("match") {
        // the event log to a per-customer table (56 days before as covariates, the outcome from
        // day 7 to day 35 so the novelty week is left out), then matched on it
        let e = &t.trail_planner;
        let _ = writeln!(s, "[[analysis]]\nname = \"trail-planner-windows\"\nverb = \"windows\"");
        let _ = writeln!(
            s,
            "describe = \"The app event log turned into one row per customer: orders and visits in the 56 days before the invitation (or the reference time), order value from day 7 to day 35 after it (the novelty week deferred)\""
        );
        let _ = writeln!(
            s,
            "[analysis.flags]\nevents = \"data/events.csv\"\nexposures = \"data/exposures.csv\"\nevent_columns = \"customer_id,ts,metric,value\"\nunit = \"customer_id\"\nexposure = \"exposed_at\""
        );
        let _ = writeln!(
            s,
            "window = [\"pre=pre:56d\", \"outcome=deferred:7d+28d\"]\nmetric = [\"order=sum,count\", \"visit=count\"]"
        );
        let _ = writeln!(
            s,
            "launch = {}\npopulation = \"exposures-and-events\"\nuntil = {}\noutput = \"tables/trail-planner-windows.csv\"\n",
            q(&e.reference_time),
            q(&e.data_end)
        );
        let _ =
            writeln!(s, "[[analysis]]\nname = \"trail-planner-aipw\"\nquestion = \"trail-planner\"\nverb = \"match\"");
        let _ = writeln!(
            s,
            "describe = \"Order value of invited customers from day 7 to day 35 against similar customers never invited (aipw on the windows table)\""
        );
        let _ = writeln!(s, "truth = {}\ntruth_of = \"average\"", e.sample_att_order_value_deferred);
        let _ = writeln!(
            s,
            "[analysis.flags]\ndata = \"out:tables/trail-planner-windows.csv\"\ntreatment = \"exposed\"\noutcome = \"outcome_order_sum\""
        );
        let _ = writeln!(
            s,
            "covariates = \"pre_order_sum,pre_order_count,pre_visit_count\"\nmethod = \"aipw\"\nestimand = \"att\"\nrope = \"1\"\noutcome_unit = \"$\"\n"
        );
    }
    if has_verb("rollout") {
        // the price cut in three waves: two cohort estimators and synthetic difference-in-differences
        // per wave (a second family), and the group-time effects by region size
        let w = &t.price_waves;
        for (name, method, extra) in [
            ("price-waves-group-time", "group-time", ""),
            ("price-waves-imputation", "imputation", ""),
            ("price-waves-sdid", "sdid", ""),
            ("price-waves-by-size", "group-time", "by = \"size_band\"\n"),
        ] {
            let _ = writeln!(s, "[[analysis]]\nname = {}\nquestion = \"price-waves\"\nverb = \"rollout\"", q(name));
            let what = match method {
                "sdid" => {
                    "synthetic difference-in-differences per wave against the ten regions that kept the old price"
                }
                "imputation" => {
                    "the imputation estimator (region and week effects from the weeks before each region's price cut)"
                }
                _ if extra.is_empty() => "group-time effects against regions not yet at the new price",
                _ => "group-time effects within large and within small regions, pooled",
            };
            let _ = writeln!(
                s,
                "describe = \"Weekly footwear orders after the price cut reached the regions in three waves: {what}\""
            );
            let _ = writeln!(s, "truth = {}\ntruth_of = \"average\"", w.sample_att);
            let _ = writeln!(
                s,
                "[analysis.flags]\ndata = \"data/price_waves.csv\"\nunit = \"region\"\ntime = \"week\"\noutcome = \"orders\""
            );
            let _ = writeln!(
                s,
                "starts = \"data/price_waves_starts.csv\"\nmethod = \"{method}\"\n{extra}outcome_unit = \"orders\"\n"
            );
        }
    }
    if has_verb("compare") {
        let _ = writeln!(s, "[[analysis]]\nname = \"past-test-compare\"\nverb = \"compare\"");
        let _ = writeln!(
            s,
            "describe = \"The past randomized win-back test: how far each observational method lands from the experiment's answer\""
        );
        let _ = writeln!(s, "truth = {}\ntruth_of = \"average\"", t.past_test.sample_att);
        let _ = writeln!(
            s,
            "[analysis.flags]\nexperiment = \"data/past_test/experiment.csv\"\narm = \"arm\"\noutcome = \"spend_90d\""
        );
        let _ = writeln!(
            s,
            "pool = \"data/past_test/pool.csv\"\ncovariates = \"spend_pre,visits_pre,tenure_months\"\nrope = \"1\"\noutcome_unit = \"$\"\n"
        );
    }
    s
}

/// Run `demo`.
///
/// # Errors
/// Bad input when the folder is not empty (without --force); internal errors otherwise.
pub fn run(a: &Args) -> anyhow::Result<()> {
    let out = OutDir::prepare(&a.output.out, a.output.force)?;
    let truth = aftercast_demo::write_scenario(&a.output.out.join("data"))?;
    aftercast_report::write_json(&a.output.out.join("truth.json"), &truth)?;
    let study = demo_study(&truth);
    let study_path = a.output.out.join("study.toml");
    aftercast_report::write_atomic(&study_path, study.as_bytes())?;
    let doc = crate::verbs::run::write_study(&study_path, &out, a.output.quiet)?;
    out.finish();
    if !a.output.quiet {
        sayln!(
            "demo written to {}: data/ (invented scenario, true effects in truth.json), study.toml, result.json, {} analyses",
            a.output.out.display(),
            doc.analyses.len()
        );
    }
    Ok(())
}
