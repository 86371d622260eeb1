//! `aftercast rollout`: a change adopted in waves (staggered adoption), by group-time effects,
//! imputation, synthetic difference-in-differences per wave, or the two-way baseline.

use crate::common::{Common, DataOptions, read_table};
use crate::failure::{bad_input, bad_input_msg};
use aftercast_core::estimate::{BreakdownInput, Estimate, JointQuestion, PartInput, Per, Point, Scope};
use aftercast_core::panel::{LongPanelSpec, Panel};
use aftercast_core::result::EffectDraws;
use aftercast_core::{Inference, Projection};
use aftercast_did::{Comparison, DidError, Rollout, RolloutDiagnostics, Spec};
use std::collections::BTreeMap;
use std::path::PathBuf;

/// The estimator of `rollout`: the did crate's, plus synthetic difference-in-differences per
/// wave from the synthetic-control crate.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum RolloutMethod {
    /// One of the did crate's estimators.
    Did(aftercast_did::Method),
    /// Synthetic difference-in-differences per wave, aligned in event time.
    Sdid,
}

impl std::str::FromStr for RolloutMethod {
    type Err = String;
    fn from_str(s: &str) -> Result<Self, String> {
        match s {
            "sdid" => Ok(RolloutMethod::Sdid),
            other => other
                .parse::<aftercast_did::Method>()
                .map(RolloutMethod::Did)
                .map_err(|_| format!("'{s}' is not a rollout method; use group-time, imputation, sdid or twfe")),
        }
    }
}

/// Arguments of `rollout` (flag names are the contract in ../shared/DESIGN.md).
#[derive(Debug, Clone, clap::Args)]
#[command(group(clap::ArgGroup::new("adoption").required(true).args(["starts", "adopted"])))]
pub struct Args {
    /// Panel in long format (CSV, or Parquet by extension .parquet or .pq): one row per unit and period.
    #[arg(long)]
    pub data: PathBuf,
    /// Unit column.
    #[arg(long)]
    pub unit: String,
    /// Time column (ISO dates or integer periods).
    #[arg(long)]
    pub time: String,
    /// Outcome column.
    #[arg(long)]
    pub outcome: String,
    /// Starts file: a unit column (named as --unit, or `unit`) and a `start` column with each
    /// unit's first adopted period; units absent or with an empty start never adopted.
    #[arg(long)]
    pub starts: Option<PathBuf>,
    /// Adoption column of the panel: 0 before adoption, 1 from the first adopted period on.
    #[arg(long)]
    pub adopted: Option<String>,
    /// Estimator: group-time, imputation, sdid, twfe (the two-way regression, a baseline).
    #[arg(long, default_value = "group-time")]
    pub method: RolloutMethod,
    /// Comparison units of group-time effects: not-yet (adopted later or never; the default) or
    /// never.
    #[arg(long)]
    pub comparison: Option<Comparison>,
    /// Pre-period covariates (group-time, doubly robust): panel columns averaged per unit over
    /// the periods before the first adoption, comma-separated.
    #[arg(long, value_delimiter = ',')]
    pub covariates: Vec<String>,
    /// Periods before adoption shown and tested jointly.
    #[arg(long, default_value_t = 6)]
    pub leads: usize,
    /// Fake adoption dates tried before the real rollout (0: none).
    #[arg(long, default_value_t = 3)]
    pub placebo_dates: usize,
    /// Segment column (one value per unit): effects per segment, each fitted on its own units.
    #[arg(long)]
    pub by: Option<String>,
    #[command(flatten)]
    pub data_options: DataOptions,
    #[command(flatten)]
    pub common: Common,
}

/// Errors of the did crate: numerical ones are ours (exit 1), the rest the input's (exit 2).
fn classify(e: DidError) -> anyhow::Error {
    match e {
        DidError::Numerical { .. } => anyhow::Error::new(e),
        other => bad_input(other),
    }
}

/// Segment of each panel unit from a text column that must be constant within a unit.
fn segments(table: &aftercast_core::RawTable, a: &Args, col: &str, panel: &Panel) -> anyhow::Result<Vec<String>> {
    let uc = table.column(&a.unit).map_err(bad_input)?;
    let sc = table.column(col).map_err(bad_input)?;
    let mut seen: BTreeMap<String, (String, String)> = BTreeMap::new();
    for r in 0..table.row_count() {
        let u = table.text(r, uc).to_string();
        let s = table.text(r, sc).trim().to_string();
        if s.is_empty() {
            return Err(bad_input(aftercast_core::DataError::MissingValue { at: table.at(r, sc) }));
        }
        match seen.get(&u) {
            Some((first, line)) if *first != s => {
                return Err(bad_input_msg(format!(
                    "{}: unit '{u}' is in segment '{first}' on {line} and '{s}' here; --by {col} needs one value per unit",
                    table.at(r, sc)
                )));
            }
            Some(_) => {}
            None => {
                seen.insert(u, (s, table.place(r)));
            }
        }
    }
    Ok(panel.units.iter().map(|u| seen.get(u).map(|v| v.0.clone()).unwrap_or_default()).collect())
}

/// Read the panel and the adoption dates.
type Loaded = (Rollout, Vec<aftercast_core::InputInfo>, Option<Vec<String>>, Vec<String>);

fn load(a: &Args) -> anyhow::Result<Loaded> {
    let mut covs = a.covariates.clone();
    if let Some(c) = &a.adopted
        && !covs.contains(c)
    {
        covs.push(c.clone());
    }
    let spec = LongPanelSpec {
        unit: a.unit.clone(),
        time: a.time.clone(),
        outcome: a.outcome.clone(),
        covariates: covs,
        date_format: a.data_options.date_format(),
    };
    let mut projection = spec.projection();
    if let Some(b) = &a.by {
        projection = projection.text(b);
    }
    let table = read_table(&a.data, &projection)?;
    let panel = Panel::from_long(&table, &spec).map_err(bad_input)?;
    let mut inputs = vec![table.info()];
    let mut notes = Vec::new();
    let start = match (&a.starts, &a.adopted) {
        (Some(path), _) => {
            let header = read_table(path, &Projection::all(aftercast_core::ColumnKind::Text))?;
            let unit_col = if header.has_column(&a.unit) {
                a.unit.clone()
            } else if header.has_column("unit") {
                "unit".to_string()
            } else {
                return Err(bad_input_msg(format!(
                    "{}: a starts file needs a unit column named '{}' (as --unit) or 'unit', and a 'start' column",
                    path.display(),
                    a.unit
                )));
            };
            if !header.has_column("start") {
                return Err(bad_input_msg(format!(
                    "{}: a starts file needs a 'start' column (each unit's first adopted period; empty: never adopted)",
                    path.display()
                )));
            }
            inputs.push(header.info());
            let (s, n) =
                aftercast_did::starts_from_table(&panel, &header, &unit_col, "start", &a.data_options.date_format())
                    .map_err(classify)?;
            notes = n;
            s
        }
        (None, Some(col)) => aftercast_did::starts_from_column(&panel, col).map_err(classify)?,
        (None, None) => return Err(bad_input_msg("name the adoption dates: --starts FILE or --adopted COL")),
    };
    let segs = match &a.by {
        Some(col) => Some(segments(&table, a, col, &panel)?),
        None => None,
    };
    let data = Rollout::new(&panel, &start, &a.covariates).map_err(classify)?;
    // segments of the units kept (units adopted by the first period are left out)
    let segs = segs
        .map(|s| data.units.iter().map(|u| s[panel.units.iter().position(|p| p == u).unwrap_or(0)].clone()).collect());
    Ok((data, inputs, segs, notes))
}

/// Run the verb.
///
/// # Errors
/// Bad input (exit 2): unreadable data or starts, unknown columns or units, a unit adopting
/// twice, a start outside the data, no comparison units left; internal failures otherwise.
pub fn run(a: &Args) -> anyhow::Result<crate::verbs::Outcome> {
    let (data, inputs, segs, notes) = load(a)?;
    let inf = a.common.inference();
    let mut est = match a.method {
        RolloutMethod::Did(m) => {
            if !a.covariates.is_empty() && m != aftercast_did::Method::GroupTime {
                return Err(bad_input_msg("--covariates: pre-period covariates are used by --method group-time only"));
            }
            if a.comparison.is_some() && m != aftercast_did::Method::GroupTime {
                return Err(bad_input_msg(
                    "--comparison applies to --method group-time; imputation compares with every unit-period not yet adopted, twfe with every unit-period",
                ));
            }
            let comparison = a.comparison.unwrap_or_default();
            let spec = Spec { method: m, comparison, leads: a.leads, placebo_shifts: a.placebo_dates };
            match &segs {
                None => aftercast_did::estimate(&data, &spec, &inf).map_err(classify)?,
                Some(s) => {
                    let mut groups: BTreeMap<String, Vec<usize>> = BTreeMap::new();
                    for (u, g) in s.iter().enumerate() {
                        groups.entry(g.clone()).or_default().push(u);
                    }
                    let mut groups: Vec<(String, Vec<usize>)> = groups.into_iter().collect();
                    crate::common::sort_segments(&mut groups);
                    let by = a.by.as_deref().unwrap_or_default();
                    aftercast_did::estimate_by(&data, by, &groups, &spec, &inf).map_err(classify)?
                }
            }
        }
        RolloutMethod::Sdid => {
            if segs.is_some() {
                return Err(bad_input_msg("--by is not available with --method sdid; use group-time or imputation"));
            }
            if !a.covariates.is_empty() || a.comparison.is_some() {
                return Err(bad_input_msg(
                    "--covariates and --comparison apply to --method group-time; sdid compares each wave with the never-adopting units",
                ));
            }
            sdid_by_wave(&data, inputs[0].clone(), &inf)?
        }
    };
    for n in notes {
        est.warn(n);
    }
    let waves = data.waves();
    let headline = format!(
        "effect on '{}' of a change adopted in {} wave{} by {} of {} units{}",
        a.outcome,
        waves.len(),
        if waves.len() == 1 { "" } else { "s" },
        waves.iter().map(|w| w.units.len()).sum::<usize>(),
        data.n_units(),
        match a.method {
            RolloutMethod::Did(aftercast_did::Method::GroupTime) =>
                format!(" (comparison: {} adopted)", a.comparison.unwrap_or_default().name()),
            _ => String::new(),
        },
    );
    crate::verbs::Outcome::new(est, &inf, inputs, headline)
}

/// Synthetic difference-in-differences per wave against the never-adopted units, each wave's
/// gaps aligned in event time and pooled by the wave's unit-periods. Draws of different waves
/// are combined index by index as if independent (they share donors, so the interval may run
/// a little narrow; said in a warning).
fn sdid_by_wave(
    data: &Rollout,
    input: aftercast_core::InputInfo,
    inf: &Inference,
) -> anyhow::Result<Estimate<RolloutDiagnostics>> {
    let never = data.never();
    if never.len() < 2 {
        return Err(bad_input_msg(format!(
            "--method sdid needs at least 2 never-adopting units as donors, the data has {}; use --method group-time or imputation",
            never.len()
        )));
    }
    // a panel of the kept units (the did crate's view), for the synthetic-control crate
    let axis = aftercast_core::TimeAxis::from_regular_points(
        aftercast_core::time::detect_frequency(&data.times).unwrap_or(aftercast_core::Frequency::Period),
        data.times.clone(),
    );
    let panel = Panel {
        name: data.outcome.clone(),
        units: data.units.clone(),
        axis,
        outcome: data.y.clone(),
        covariates: vec![],
        input,
    };
    let waves = data.waves();
    // per wave: units, effects per event time (point, per draw), counterfactual mean
    struct WaveFit {
        units: usize,
        point: Vec<f64>,
        draws: Vec<Vec<f64>>,
        baseline_point: f64,
        baseline_draws: Vec<f64>,
    }
    let mut fits = Vec::new();
    for w in &waves {
        let treated: Vec<String> = w.units.iter().map(|&u| data.units[u].clone()).collect();
        let exclude: Vec<String> = (0..data.n_units())
            .filter(|&u| data.start[u].is_some() && !w.units.contains(&u))
            .map(|u| data.units[u].clone())
            .collect();
        let params = aftercast_synth::SynthParams::new()
            .method(aftercast_synth::Method::Sdid)
            .inference(*inf)
            .exclude(exclude)
            .sdid_placebo_reps(inf.draws.clamp(20, 500))
            .check()
            .map_err(bad_input)?;
        let fit = params.fit(&panel, &treated, data.times[w.start]).map_err(crate::verbs::synthetic::classify)?;
        let p0 = fit.first_post;
        let point: Vec<f64> = (p0..fit.times.len()).map(|t| fit.observed[t] - fit.synthetic[t]).collect();
        let baseline_point = fit.synthetic[p0..].iter().sum::<f64>() / (fit.times.len() - p0) as f64;
        let EffectDraws::Path { observed, counterfactual, .. } = fit.effect_draws() else {
            return Err(anyhow::anyhow!("synthetic difference-in-differences returned no path draws"));
        };
        // the method's own replications (jackknife over units with several treated units,
        // placebo with one) give a covariance of the effect path; normal draws with that
        // covariance, one stream per wave, so that waves can be pooled draw by draw
        let reps: Vec<Vec<f64>> =
            counterfactual.iter().map(|cf| observed.iter().zip(cf).map(|(y, c)| y - c).collect()).collect();
        let m = reps.len().max(1) as f64;
        let seed = aftercast_resample::rng::child_seed(inf.seed, &format!("sdid-wave-{}", w.start));
        let draws: Vec<Vec<f64>> = aftercast_resample::rng::par_draws(seed, inf.draws, |_, s| {
            let g: Vec<f64> = reps.iter().map(|_| s.normal()).collect();
            (0..point.len())
                .map(|k| point[k] + reps.iter().zip(&g).map(|(r, z)| z * (r[k] - point[k])).sum::<f64>() / m.sqrt())
                .collect()
        });
        let baseline_draws = draws
            .iter()
            .map(|e| observed.iter().zip(e).map(|(y, e)| y - e).sum::<f64>() / e.len().max(1) as f64)
            .collect();
        fits.push(WaveFit { units: w.units.len(), point, draws, baseline_point, baseline_draws });
    }
    let nd = fits.iter().map(|f| f.draws.len()).min().unwrap_or(0);
    let weight = |f: &WaveFit| (f.units * f.point.len()) as f64;
    let total_w: f64 = fits.iter().map(weight).sum();
    let mean = |v: &[f64]| v.iter().sum::<f64>() / v.len() as f64;
    let overall = fits.iter().map(|f| weight(f) * mean(&f.point)).sum::<f64>() / total_w;
    let baseline = fits.iter().map(|f| weight(f) * f.baseline_point).sum::<f64>() / total_w;
    let effect: Vec<f64> =
        (0..nd).map(|d| fits.iter().map(|f| weight(f) * mean(&f.draws[d])).sum::<f64>() / total_w).collect();
    let base_draws: Vec<f64> =
        (0..nd).map(|d| fits.iter().map(|f| weight(f) * f.baseline_draws[d]).sum::<f64>() / total_w).collect();
    let kmax = fits.iter().map(|f| f.point.len()).max().unwrap_or(0);
    let event_rows: Vec<PartInput> = (0..kmax)
        .map(|k| {
            let at: Vec<&WaveFit> = fits.iter().filter(|f| f.point.len() > k).collect();
            let w: f64 = at.iter().map(|f| f.units as f64).sum();
            PartInput {
                label: k.to_string(),
                key: Some(k as f64),
                point: at.iter().map(|f| f.units as f64 * f.point[k]).sum::<f64>() / w,
                draws: (0..nd).map(|d| at.iter().map(|f| f.units as f64 * f.draws[d][k]).sum::<f64>() / w).collect(),
                units: at.iter().map(|f| f.units).sum(),
                note: None,
            }
        })
        .collect();
    let wave_rows: Vec<PartInput> = fits
        .iter()
        .zip(&waves)
        .map(|(f, w)| PartInput {
            label: data.times[w.start].to_string(),
            key: None,
            point: mean(&f.point),
            draws: (0..nd).map(|d| mean(&f.draws[d])).collect(),
            units: f.units,
            note: None,
        })
        .collect();
    let covered: usize = fits.iter().map(|f| f.units * f.point.len()).sum();
    let spec = Spec { method: aftercast_did::Method::GroupTime, comparison: Comparison::Never, ..Spec::default() };
    let diagnostics = RolloutDiagnostics {
        method: "sdid".into(),
        comparison: Some("never".into()),
        units: data.n_units(),
        periods: data.n_times(),
        never_adopted: never.len(),
        waves: waves
            .iter()
            .map(|w| aftercast_did::estimate::WaveInfo {
                start: data.times[w.start].to_string(),
                units: w.units.len(),
                periods_after: data.n_times() - w.start,
            })
            .collect(),
        covered_unit_periods: covered,
        uncovered_unit_periods: 0,
        covariates: vec![],
        failed_draws: 0,
        left_out_units: data.left_out.clone(),
        twfe_decomposition: aftercast_did::decompose::decompose(data).ok(),
        by: None,
        segments: None,
    };
    let mut est = Estimate::new(
        "rollout",
        "sdid",
        "average effect on the adopters per adopted unit and period (ATT), each wave against the never-adopting units",
        Point::Scalar { effect: overall, baseline: Some(baseline) },
        EffectDraws::Scalar { effect, baseline: Some(base_draws) },
        Scope { per: Per::UnitPeriod, units: covered },
        diagnostics,
    );
    est.sections.breakdowns = vec![
        BreakdownInput {
            clusters: None,
            by: "event-time".into(),
            title: "Effect by periods since adoption".into(),
            joint: None,
            rows: event_rows,
        },
        BreakdownInput {
            clusters: None,
            by: "wave".into(),
            title: "Effect by wave (first adopted period)".into(),
            joint: (wave_rows.len() >= 2).then(|| (JointQuestion::AllEqual, (0..wave_rows.len()).collect())),
            rows: wave_rows,
        },
    ];
    est.warn("synthetic difference-in-differences is fitted per wave; each wave's draws are normal with the covariance of its jackknife (several units) or placebo (one unit) replications, and the waves are combined as if independent; they share donors, so the pooled interval may run a little narrow");
    if !data.left_out.is_empty() {
        est.warn(format!("{} units had adopted by the first period and are left out", data.left_out.len()));
    }
    est.assumptions = aftercast_did::estimate::assumptions(&spec, false);
    est.assumptions[0] = "Each wave's outcome, without the change, would have followed its weighted never-adopting donors up to a constant shift (synthetic difference-in-differences).".into();
    Ok(est)
}
