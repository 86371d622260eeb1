//! `aftercast._native`: the estimators of the command line as a Python module.
//!
//! Nothing here estimates anything. A call from Python is turned into the very command line
//! the binary would parse (the option list is read from the binary's own flag definitions, see
//! [`options`]), its tables are handed over through the Arrow C data interface and registered
//! under a name every reader knows ([`aftercast_core::frame`]), and the verb runs through the
//! library the binary uses ([`aftercast_cli::analyze`]). The result document, draws, report and
//! terminal summary are the binary's, byte for byte.
//!
//! A run happens on a worker thread with the interpreter released; the calling thread checks
//! for KeyboardInterrupt ten times a second and, when one comes, stops the run through
//! [`aftercast_core::stop`] and re-raises it. No panic crosses into Python: it becomes
//! `aftercast.InternalError`.

use aftercast_cli::{Cli, Outcome};
use aftercast_core::frame::{Frame, Registration};
use aftercast_core::{AnalysisResult, Figures, KeptDraws};
use arrow_array::RecordBatchReader;
use arrow_array::ffi_stream::{FFI_ArrowArrayStream, RecordBatchStreamReader};
use clap::{ArgAction, CommandFactory, Parser};
use numpy::{PyArray1, PyArrayMethods};
use pyo3::prelude::*;
use pyo3::types::{IntoPyDict, PyCapsule, PyCapsuleMethods, PyDict};
use std::panic::AssertUnwindSafe;
use std::sync::Mutex;
use std::sync::mpsc::RecvTimeoutError;
use std::time::Duration;

/// One analysis at a time per process: the tables of a call are registered under names of
/// their own, and the estimators use every core already.
static RUN: Mutex<()> = Mutex::new(());

/// The message of the last panic (a bug), for the InternalError raised in its place.
static LAST_PANIC: Mutex<Option<String>> = Mutex::new(None);

/// Raise one of the package's exceptions (defined in Python, aftercast/_errors.py).
fn error(py: Python<'_>, kind: &str, message: String) -> PyErr {
    let made = py
        .import("aftercast._errors")
        .and_then(|m| m.getattr(kind))
        .and_then(|cls| cls.call1((message.clone(),)))
        .map(PyErr::from_value);
    made.unwrap_or_else(|e| e)
}

/// Read a table through its `__arrow_c_stream__` capsule (the Arrow PyCapsule interface of
/// pyarrow, polars and pandas).
fn import_table(py: Python<'_>, name: &str, short: &str, obj: &Bound<'_, PyAny>) -> PyResult<Frame> {
    let bad = |what: String| error(py, "DataError", format!("{name}: {what}"));
    let capsule =
        obj.call_method0("__arrow_c_stream__").map_err(|e| bad(format!("cannot be read as an Arrow table ({e})")))?;
    let capsule =
        capsule.cast_into::<PyCapsule>().map_err(|_| bad("__arrow_c_stream__ did not return a capsule".into()))?;
    let ptr = capsule
        .pointer_checked(Some(c"arrow_array_stream"))
        .map_err(|_| bad("__arrow_c_stream__ returned a capsule that is not an Arrow stream".into()))?;
    // SAFETY: the capsule holds a live FFI_ArrowArrayStream (checked by its name, as the Arrow
    // PyCapsule interface specifies); `from_raw` moves the stream out and leaves a released one
    // behind, so the capsule's destructor does not release it a second time.
    let reader = unsafe { RecordBatchStreamReader::from_raw(ptr.as_ptr().cast::<FFI_ArrowArrayStream>()) }
        .map_err(|e| bad(format!("cannot read the Arrow stream: {e}")))?;
    let schema = reader.schema();
    let batches =
        reader.collect::<Result<Vec<_>, _>>().map_err(|e| bad(format!("cannot read the Arrow stream: {e}")))?;
    Ok(Frame { schema, batches, short: short.to_string() })
}

/// The options of a verb (`["forecast"]`, `["plan", "match"]`), read from the command line's
/// own definitions: name, flag, help, default, whether required, a switch, a list, takes a table, the choices.
#[pyfunction]
fn options<'py>(py: Python<'py>, path: Vec<String>) -> PyResult<Vec<Bound<'py, PyDict>>> {
    let mut cmd = Cli::command();
    cmd.build();
    let mut at = &cmd;
    for p in &path {
        at = at
            .find_subcommand(p)
            .ok_or_else(|| error(py, "OptionError", format!("no analysis named '{}'", path.join(" "))))?;
    }
    let mut out = Vec::new();
    for a in at.get_arguments() {
        let id = a.get_id().as_str();
        if a.is_hide_set() || matches!(id, "help" | "version") {
            continue;
        }
        let d = PyDict::new(py);
        d.set_item("name", id)?;
        d.set_item("flag", a.get_long().map(|l| format!("--{l}")))?;
        d.set_item("table", a.get_long().is_some_and(aftercast_cli::takes_table))?;
        d.set_item("help", a.get_help().map(|h| h.to_string()).unwrap_or_default())?;
        d.set_item("required", a.is_required_set())?;
        d.set_item("switch", matches!(a.get_action(), ArgAction::SetTrue))?;
        d.set_item("delimited", a.get_value_delimiter().is_some())?;
        d.set_item("list", matches!(a.get_action(), ArgAction::Append) || a.get_value_delimiter().is_some())?;
        let defaults: Vec<String> = a.get_default_values().iter().map(|v| v.to_string_lossy().into_owned()).collect();
        d.set_item("defaults", defaults)?;
        let choices: Vec<String> = a.get_possible_values().iter().map(|p| p.get_name().to_string()).collect();
        d.set_item("choices", choices)?;
        out.push(d);
    }
    Ok(out)
}

/// Run one analysis: `argv` is the command line after `aftercast` (the verb first, `--threads`
/// among its flags as the binary takes it), `tables` the in-memory tables named in it (name in
/// argv and messages, short name, table).
#[pyfunction]
fn run(py: Python<'_>, argv: Vec<String>, tables: Vec<(String, String, Bound<'_, PyAny>)>) -> PyResult<Analysis> {
    let mut frames = Vec::with_capacity(tables.len());
    for (name, short, obj) in &tables {
        frames.push((name.clone(), import_table(py, name, short, obj)?));
    }
    let cli = Cli::try_parse_from(std::iter::once("aftercast".to_string()).chain(argv))
        .map_err(|e| error(py, "OptionError", aftercast_cli::usage_line(&e)))?;
    let threads = aftercast_cli::threads_of(&cli.verb).and_then(|n| usize::try_from(n).ok());
    // wait for a run of another thread to end (the interpreter released meanwhile)
    let _one = loop {
        match RUN.try_lock() {
            Ok(g) => break g,
            Err(std::sync::TryLockError::Poisoned(e)) => break e.into_inner(),
            Err(std::sync::TryLockError::WouldBlock) => {
                py.detach(|| std::thread::sleep(Duration::from_millis(20)));
                py.check_signals()?;
            }
        }
    };
    let mut registered: Vec<Registration> = Vec::with_capacity(frames.len());
    for (name, frame) in frames {
        registered.push(aftercast_core::frame::register(&name, frame).map_err(|m| error(py, "InternalError", m))?);
    }
    aftercast_core::stop::reset();
    let (tx, rx) = std::sync::mpsc::channel();
    let worker = std::thread::Builder::new()
        .name("aftercast".into())
        .stack_size(16 << 20)
        .spawn(move || {
            let out =
                std::panic::catch_unwind(AssertUnwindSafe(|| -> Result<Option<anyhow::Result<Outcome>>, String> {
                    match threads {
                        Some(n) => {
                            let pool = rayon::ThreadPoolBuilder::new()
                                .num_threads(n.max(1))
                                .build()
                                .map_err(|e| e.to_string())?;
                            Ok(pool.install(|| aftercast_cli::analyze(&cli.verb)))
                        }
                        None => Ok(aftercast_cli::analyze(&cli.verb)),
                    }
                }));
            let _ = tx.send(out);
        })
        .map_err(|e| error(py, "InternalError", format!("cannot start the worker thread: {e}")))?;
    let mut rx = rx;
    let out = loop {
        // the receiver goes into the released section and comes back (it is not Sync)
        let (got, back) = py.detach(move || (rx.recv_timeout(Duration::from_millis(100)), rx));
        rx = back;
        match got {
            Ok(out) => break out,
            Err(RecvTimeoutError::Timeout) => {
                if let Err(interrupt) = py.check_signals() {
                    // stop the run at its next check, wait for it to unwind, re-raise
                    aftercast_core::stop::abort();
                    let _ = py.detach(|| worker.join());
                    aftercast_core::stop::reset();
                    return Err(interrupt);
                }
            }
            Err(RecvTimeoutError::Disconnected) => {
                break Err(Box::new("the worker thread ended without an answer") as Box<dyn std::any::Any + Send>);
            }
        }
    };
    let _ = py.detach(|| worker.join());
    drop(registered);
    match out {
        Ok(Ok(Some(Ok(outcome)))) => Analysis::new(py, outcome),
        Ok(Ok(Some(Err(e)))) => {
            let message = format!("{e:#}");
            Err(match aftercast_cli::exit_code(&e) {
                2 => error(py, "DataError", message),
                _ => error(py, "InternalError", message),
            })
        }
        Ok(Ok(None)) => Err(error(py, "OptionError", "this verb is not an analysis".into())),
        Ok(Err(m)) => Err(error(py, "InternalError", m)),
        Err(payload) => {
            if aftercast_core::stop::is_stop(payload.as_ref()) {
                return Err(pyo3::exceptions::PyKeyboardInterrupt::new_err("stopped"));
            }
            let said = LAST_PANIC.lock().unwrap_or_else(|e| e.into_inner()).take();
            let text = said.unwrap_or_else(|| panic_text(payload.as_ref()));
            Err(error(py, "InternalError", format!("{text} (a bug; please report it with the call)")))
        }
    }
}

fn panic_text(payload: &(dyn std::any::Any + Send)) -> String {
    payload
        .downcast_ref::<&str>()
        .map(|s| s.to_string())
        .or_else(|| payload.downcast_ref::<String>().cloned())
        .unwrap_or_else(|| "unexpected failure".into())
}

/// The answer of one analysis: the result document, the draws (NumPy arrays owning the
/// estimator's buffers), the figure data and the verb's tables.
#[pyclass(module = "aftercast._native", frozen)]
struct Analysis {
    result: AnalysisResult,
    headline: String,
    tables: Vec<aftercast_report::Table>,
    figures: Figures,
    /// (quantity, draws) in the order of draws.parquet's columns.
    draws: Vec<(&'static str, Py<PyArray1<f64>>)>,
}

impl Analysis {
    fn new(py: Python<'_>, outcome: Outcome) -> PyResult<Analysis> {
        let Outcome { finished, headline, tables, interrupted: _ } = outcome;
        let KeptDraws { average, cumulative, relative, total } = finished.draws;
        let mut draws = Vec::new();
        for (name, v) in [("average", average), ("cumulative", cumulative), ("relative", relative), ("total", total)] {
            if v.is_empty() {
                continue;
            }
            // the Vec becomes the array's buffer; read-only, as the result it belongs to
            let arr = PyArray1::from_vec(py, v);
            arr.call_method("setflags", (), Some(&[("write", false)].into_py_dict(py)?))?;
            draws.push((name, arr.unbind()));
        }
        Ok(Analysis { result: finished.result, headline, tables, figures: finished.figures, draws })
    }

    /// The outcome again, for the report (the draws copied back from the arrays).
    fn outcome(&self, py: Python<'_>) -> PyResult<Outcome> {
        let mut kept = KeptDraws::default();
        for (name, arr) in &self.draws {
            let v = arr.bind(py).to_vec()?;
            match *name {
                "average" => kept.average = v,
                "cumulative" => kept.cumulative = v,
                "relative" => kept.relative = v,
                _ => kept.total = v,
            }
        }
        Ok(Outcome {
            finished: aftercast_cli::Finished {
                result: self.result.clone(),
                draws: kept,
                figures: self.figures.clone(),
            },
            headline: self.headline.clone(),
            tables: self.tables.clone(),
            interrupted: None,
        })
    }
}

#[pymethods]
impl Analysis {
    /// The result document exactly as the command line writes result.json.
    fn json(&self, py: Python<'_>) -> PyResult<String> {
        let bytes =
            aftercast_report::json_bytes(&self.result).map_err(|e| error(py, "InternalError", e.to_string()))?;
        String::from_utf8(bytes).map_err(|e| error(py, "InternalError", e.to_string()))
    }

    /// One line saying what was estimated on what.
    #[getter]
    fn headline(&self) -> String {
        self.headline.clone()
    }

    /// The terminal summary the command line prints.
    fn terminal(&self) -> String {
        aftercast_report::terminal_summary(&self.result, &self.headline, &self.tables)
    }

    /// The draws by quantity (average, cumulative, relative, total), as read-only arrays.
    fn draws<'py>(&self, py: Python<'py>) -> Vec<(&'static str, Bound<'py, PyArray1<f64>>)> {
        self.draws.iter().map(|(n, a)| (*n, a.bind(py).clone())).collect()
    }

    /// The verb's own tables (a comparison, a plan): (title, headers, rows).
    fn tables(&self) -> Vec<(String, Vec<String>, Vec<Vec<String>>)> {
        self.tables.iter().map(|t| (t.title.clone(), t.headers.clone(), t.rows.clone())).collect()
    }

    /// The whole report (one self-contained HTML page); `command` is how to reproduce it.
    fn report_html(&self, py: Python<'_>, command: String) -> PyResult<String> {
        let outcome = self.outcome(py)?;
        Ok(aftercast_report::html::render(&aftercast_cli::single_report(&outcome, command)))
    }

    /// Write a page (the report as `report_html` gave it, in the caller's wording) atomically:
    /// a temporary file beside `path`, renamed over it when whole.
    #[staticmethod]
    fn write_page(py: Python<'_>, path: std::path::PathBuf, html: String) -> PyResult<()> {
        py.detach(|| aftercast_report::write_atomic(&path, html.as_bytes()))
            .map_err(|e| error(py, "DataError", e.to_string()))
    }

    /// The answer card and the lead chart, for a notebook cell.
    fn fragment_html(&self, py: Python<'_>) -> PyResult<String> {
        let outcome = self.outcome(py)?;
        let a = aftercast_cli::report_analysis(&outcome, &self.headline, None, &self.result.verb, None);
        Ok(aftercast_report::html::fragment(&a))
    }
}

/// The module.
#[pymodule]
fn _native(m: &Bound<'_, PyModule>) -> PyResult<()> {
    // a panic is a bug: its message goes into the InternalError, not onto stderr
    std::panic::set_hook(Box::new(|info| {
        let at = info.location().map(|l| format!(" at {}:{}", l.file(), l.line())).unwrap_or_default();
        let text = format!("internal error{at}: {}", panic_text(info.payload()));
        *LAST_PANIC.lock().unwrap_or_else(|e| e.into_inner()) = Some(text);
    }));
    m.add_function(wrap_pyfunction!(options, m)?)?;
    m.add_function(wrap_pyfunction!(run, m)?)?;
    m.add_class::<Analysis>()?;
    m.add("__version__", aftercast_core::result::TOOL_VERSION)?;
    Ok(())
}
