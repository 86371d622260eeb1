//! Tables handed over in memory by a program that embeds aftercast (the Python package hands
//! over pandas, polars and pyarrow tables through the Arrow C data interface).
//!
//! The embedding program registers a table under a name for the length of a call
//! ([`register`]); every reader then reads that name exactly as it reads a file
//! ([`crate::table::RawTable::read_columns`]), so files and data frames share one set of checks,
//! one set of messages and one path into every estimator. Rows are counted from 0, as the
//! frame's positions (`df.iloc[r]`), and messages say "row" rather than "line".

use arrow_array::RecordBatch;
use arrow_schema::SchemaRef;
use std::path::{Path, PathBuf};
use std::sync::{Arc, Mutex};

/// A table in memory: its schema and its record batches, in row order.
#[derive(Debug, Clone)]
pub struct Frame {
    /// Column names and types.
    pub schema: SchemaRef,
    /// The rows, batch after batch.
    pub batches: Vec<RecordBatch>,
    /// A short name where a table is named in a result (a pool's setting), as a file's stem
    /// names it.
    pub short: String,
}

impl Frame {
    /// Number of rows over every batch.
    pub fn rows(&self) -> usize {
        self.batches.iter().map(RecordBatch::num_rows).sum()
    }
}

type Registry = Vec<(PathBuf, Arc<Frame>)>;

static FRAMES: Mutex<Registry> = Mutex::new(Vec::new());

fn frames() -> std::sync::MutexGuard<'static, Registry> {
    FRAMES.lock().unwrap_or_else(|e| e.into_inner())
}

/// A registered table: readers find it under its name until this is dropped.
#[derive(Debug)]
#[must_use = "the table is unregistered when this is dropped"]
pub struct Registration {
    name: PathBuf,
}

impl Registration {
    /// The name readers know the table by (what the command line would take as a path).
    pub fn name(&self) -> &Path {
        &self.name
    }
}

impl Drop for Registration {
    fn drop(&mut self) {
        frames().retain(|(n, _)| *n != self.name);
    }
}

/// Register a table under a name for the length of a call.
///
/// # Errors
/// The name is already registered (two calls running at once must use different names).
pub fn register(name: &str, frame: Frame) -> Result<Registration, String> {
    let name = PathBuf::from(name);
    let mut all = frames();
    if all.iter().any(|(n, _)| *n == name) {
        return Err(format!("a table named {} is registered already", name.display()));
    }
    all.push((name.clone(), Arc::new(frame)));
    Ok(Registration { name })
}

/// The table registered under a name, if any.
pub fn lookup(path: &Path) -> Option<Arc<Frame>> {
    frames().iter().find(|(n, _)| n == path).map(|(_, f)| Arc::clone(f))
}
