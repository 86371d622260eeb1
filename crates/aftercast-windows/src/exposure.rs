//! The unit universe: who the units are, their group, and when each was exposed.
//!
//! The exposures file lists every unit once. Events of units not in it are bad rows
//! ("unknown unit"). Per-unit exposure times come from its time column; an empty cell means the
//! unit was never exposed and its windows are anchored at the reference time (or, if none was
//! given, the launch time). Without a time column every unit is exposed at the launch time.

use crate::error::{Cell, WindowsError, WindowsResult};
use crate::params::WindowSpec;
use crate::time::{self, Offset};
use aftercast_core::table::{InputInfo, RawTable};
use std::collections::HashMap;
use std::hash::{BuildHasherDefault, Hasher};
use std::path::Path;

/// A small, fast, non-cryptographic hasher for unit ids (the multiply-rotate scheme of the
/// Firefox/rustc "Fx" hash with a final avalanche step). Unit ids are not attacker-chosen keys
/// in this setting.
#[derive(Default, Clone, Copy)]
pub struct UnitHasher {
    hash: u64,
}

const SEED: u64 = 0x51_7c_c1_b7_27_22_0a_95;

impl UnitHasher {
    #[inline]
    fn add(&mut self, word: u64) {
        self.hash = (self.hash.rotate_left(5) ^ word).wrapping_mul(SEED);
    }
}

impl Hasher for UnitHasher {
    #[inline]
    fn write(&mut self, bytes: &[u8]) {
        let mut chunks = bytes.chunks_exact(8);
        for c in &mut chunks {
            let mut w = [0u8; 8];
            w.copy_from_slice(c);
            self.add(u64::from_le_bytes(w));
        }
        let rest = chunks.remainder();
        if !rest.is_empty() {
            let mut w = [0u8; 8];
            w[..rest.len()].copy_from_slice(rest);
            self.add(u64::from_le_bytes(w) ^ ((rest.len() as u64) << 59));
        }
    }
    #[inline]
    fn write_u8(&mut self, i: u8) {
        self.add(u64::from(i));
    }
    #[inline]
    fn write_usize(&mut self, i: usize) {
        self.add(i as u64);
    }
    #[inline]
    fn finish(&self) -> u64 {
        // The multiply only carries low bits upwards, and ids that differ only in their last
        // characters differ only in high bits: mix both ways (MurmurHash3's 64-bit finalizer) so
        // that the table's bucket bits depend on every byte.
        let mut h = self.hash;
        h ^= h >> 33;
        h = h.wrapping_mul(0xff51_afd7_ed55_8ccd);
        h ^= h >> 33;
        h = h.wrapping_mul(0xc4ce_b9fe_1a85_ec53);
        h ^ (h >> 33)
    }
}

/// An id of at most 23 bytes stored inline (length in the last byte), so that a lookup compares
/// keys inside the table instead of following a pointer to a heap string (one cache miss less
/// per event).
#[derive(Clone, Copy, PartialEq, Eq, Hash)]
struct ShortId([u8; 24]);

impl ShortId {
    #[inline]
    fn new(s: &str) -> Option<Self> {
        let b = s.as_bytes();
        if b.len() > 23 {
            return None;
        }
        let mut k = [0u8; 24];
        k[..b.len()].copy_from_slice(b);
        k[23] = b.len() as u8;
        Some(Self(k))
    }
}

/// Map from unit id to unit index: short ids inline, longer ones on the heap.
#[derive(Debug, Clone, Default)]
pub struct UnitMap {
    short: HashMap<ShortId, u32, BuildHasherDefault<UnitHasher>>,
    long: HashMap<Box<str>, u32, BuildHasherDefault<UnitHasher>>,
}

impl std::fmt::Debug for ShortId {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        let n = usize::from(self.0[23]);
        write!(f, "{:?}", String::from_utf8_lossy(&self.0[..n]))
    }
}

impl UnitMap {
    fn with_capacity(n: usize) -> Self {
        Self { short: HashMap::with_capacity_and_hasher(n, BuildHasherDefault::default()), long: HashMap::default() }
    }

    /// Index of a unit id.
    #[inline]
    pub fn get(&self, id: &str) -> Option<u32> {
        match ShortId::new(id) {
            Some(k) => self.short.get(&k).copied(),
            None => self.long.get(id).copied(),
        }
    }

    /// Insert; returns the previous index if the id was present.
    fn insert(&mut self, id: &str, i: u32) -> Option<u32> {
        match ShortId::new(id) {
            Some(k) => self.short.insert(k, i),
            None => self.long.insert(id.into(), i),
        }
    }

    /// Whether the id is present.
    pub fn contains(&self, id: &str) -> bool {
        self.get(id).is_some()
    }

    /// Number of ids.
    pub fn len(&self) -> usize {
        self.short.len() + self.long.len()
    }

    /// Whether the map is empty.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }
}

/// How to read the exposures file.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct ExposureOptions {
    /// Unit id column (default `unit`).
    pub unit: String,
    /// Exposure time column; `None` = every unit is exposed at the launch time.
    pub time: Option<String>,
    /// Group column (region, segment, arm); `None` = one group named `all`.
    pub group: Option<String>,
    /// One launch time for all units (used when there is no time column, and as the reference
    /// for never-exposed units when no reference is given).
    pub launch: Option<i64>,
    /// Reference time for never-exposed units.
    pub reference: Option<i64>,
}

impl Default for ExposureOptions {
    fn default() -> Self {
        Self { unit: "unit".into(), time: Some("exposure".into()), group: None, launch: None, reference: None }
    }
}

/// The units of a run.
#[derive(Debug, Clone)]
pub struct Exposures {
    units: Vec<String>,
    groups: Vec<String>,
    group_of: Vec<u32>,
    exposed: Vec<bool>,
    time: Vec<i64>,
    index: UnitMap,
    info: Option<InputInfo>,
    has_group: bool,
    never_time: Option<i64>,
}

/// One unit given in code: id, exposure time (`None` = never exposed), group.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct UnitRow {
    /// Unit id.
    pub unit: String,
    /// Exposure instant, or `None` if never exposed.
    pub exposure: Option<i64>,
    /// Group name.
    pub group: String,
}

impl Exposures {
    /// Read the exposures file (CSV or Parquet) with the analysis offset of `spec` for
    /// timestamps written without a zone.
    ///
    /// # Errors
    /// Core read errors, [`WindowsError::MissingColumn`], [`WindowsError::BadTimestamp`],
    /// [`WindowsError::MissingCell`], [`WindowsError::DuplicateUnit`],
    /// [`WindowsError::NoReference`], [`WindowsError::BadParameter`] (no launch time and no time
    /// column).
    pub fn read(path: &Path, options: &ExposureOptions, spec: &WindowSpec) -> WindowsResult<Self> {
        let table = RawTable::read(path)?;
        Self::from_table(&table, options, spec.offset())
    }

    /// Build from a table already read.
    ///
    /// # Errors
    /// As [`Exposures::read`].
    pub fn from_table(table: &RawTable, options: &ExposureOptions, offset: Offset) -> WindowsResult<Self> {
        let col = |name: &str| {
            table.column(name).map_err(|_| WindowsError::MissingColumn {
                path: table.path().to_path_buf(),
                name: name.to_string(),
                available: table.header().to_vec(),
            })
        };
        let ucol = col(&options.unit)?;
        let tcol = options.time.as_deref().map(col).transpose()?;
        let gcol = options.group.as_deref().map(col).transpose()?;
        if tcol.is_none() && options.launch.is_none() {
            return Err(WindowsError::bad_param(
                "exposure",
                "",
                "give an exposure-time column or one launch time for all units",
            ));
        }
        let cell = |line: u64, c: usize| Cell {
            file: table.path().to_path_buf(),
            line,
            column: c + 1,
            column_name: table.header()[c].clone(),
        };
        let mut rows = Vec::with_capacity(table.row_count());
        let mut first_line: HashMap<String, u64> = HashMap::new();
        for r in 0..table.row_count() {
            let row_line = table.line(r);
            let unit_text = table.text(r, ucol);
            let unit = unit_text.as_ref();
            if unit.is_empty() {
                return Err(WindowsError::MissingCell { at: cell(row_line, ucol) });
            }
            if let Some(first) = first_line.insert(unit.to_string(), row_line) {
                return Err(WindowsError::DuplicateUnit {
                    at: cell(row_line, ucol),
                    unit: unit.to_string(),
                    first_line: first,
                });
            }
            let exposure = match tcol {
                None => options.launch,
                Some(c) => {
                    let text_cell = table.text(r, c);
                    let text = text_cell.as_ref();
                    if text.is_empty() {
                        if options.reference.or(options.launch).is_none() {
                            return Err(WindowsError::NoReference { at: cell(row_line, c), unit: unit.to_string() });
                        }
                        None
                    } else {
                        Some(time::parse_timestamp(text, offset).ok_or_else(|| WindowsError::BadTimestamp {
                            at: cell(row_line, c),
                            text: text.to_string(),
                        })?)
                    }
                }
            };
            let group = match gcol {
                None => "all".to_string(),
                Some(c) => {
                    let g_cell = table.text(r, c);
                    let g = g_cell.as_ref();
                    if g.is_empty() {
                        return Err(WindowsError::MissingCell { at: cell(row_line, c) });
                    }
                    g.to_string()
                }
            };
            rows.push(UnitRow { unit: unit.to_string(), exposure, group });
        }
        let mut out = Self::from_rows(rows, options.launch, options.reference)?;
        out.info = Some(table.info());
        out.has_group = gcol.is_some();
        Ok(out)
    }

    /// Build from rows given in code. Never-exposed units get `reference`, else `launch`.
    ///
    /// # Errors
    /// [`WindowsError::BadParameter`] for a repeated unit or a never-exposed unit without a
    /// reference or launch time.
    pub fn from_rows(rows: Vec<UnitRow>, launch: Option<i64>, reference: Option<i64>) -> WindowsResult<Self> {
        let n = rows.len();
        if u32::try_from(n).is_err() {
            return Err(WindowsError::bad_param("exposures", n.to_string(), "at most 4 294 967 295 units"));
        }
        let mut units = Vec::with_capacity(n);
        let mut groups: Vec<String> = Vec::new();
        let mut group_index: HashMap<String, u32> = HashMap::new();
        let mut group_of = Vec::with_capacity(n);
        let mut exposed = Vec::with_capacity(n);
        let mut times = Vec::with_capacity(n);
        let mut index = UnitMap::with_capacity(n);
        for (i, r) in rows.into_iter().enumerate() {
            if index.insert(&r.unit, i as u32).is_some() {
                return Err(WindowsError::bad_param("exposures", &r.unit, "the unit is listed twice"));
            }
            let t = match r.exposure {
                Some(t) => {
                    exposed.push(true);
                    t
                }
                None => {
                    exposed.push(false);
                    reference.or(launch).ok_or_else(|| {
                        WindowsError::bad_param(
                            "reference",
                            &r.unit,
                            "a never-exposed unit needs a reference or launch time",
                        )
                    })?
                }
            };
            times.push(t);
            let next = groups.len() as u32;
            let g = *group_index.entry(r.group.clone()).or_insert_with(|| {
                groups.push(r.group.clone());
                next
            });
            group_of.push(g);
            units.push(r.unit);
        }
        Ok(Self {
            units,
            groups,
            group_of,
            exposed,
            time: times,
            index,
            info: None,
            has_group: true,
            never_time: reference.or(launch),
        })
    }

    /// The group of units found only in the events: `unlisted`, or `all` when the exposures
    /// have no group column.
    pub fn unlisted_group(&self) -> &'static str {
        if self.has_group { "unlisted" } else { "all" }
    }

    /// Add units found only in the events as never-exposed units anchored at the reference time
    /// (or the launch time), sorted by id; ids already present are ignored.
    ///
    /// # Errors
    /// [`WindowsError::BadParameter`] when there are new units but no reference time.
    pub fn add_unlisted(&mut self, mut ids: Vec<String>) -> WindowsResult<usize> {
        let reference = self.never_time;
        ids.retain(|u| !self.index.contains(u));
        ids.sort();
        ids.dedup();
        if ids.is_empty() {
            return Ok(0);
        }
        let t = reference.ok_or_else(|| {
            WindowsError::bad_param(
                "reference",
                &ids[0],
                "units found only in the events need a reference or launch time",
            )
        })?;
        let name = self.unlisted_group();
        let g = match self.groups.iter().position(|x| x == name) {
            Some(g) => g as u32,
            None => {
                self.groups.push(name.to_string());
                (self.groups.len() - 1) as u32
            }
        };
        let n = ids.len();
        for id in ids {
            let i = self.units.len() as u32;
            self.index.insert(&id, i);
            self.units.push(id);
            self.group_of.push(g);
            self.exposed.push(false);
            self.time.push(t);
        }
        Ok(n)
    }

    /// Number of units.
    pub fn len(&self) -> usize {
        self.units.len()
    }
    /// Whether there are no units.
    pub fn is_empty(&self) -> bool {
        self.units.is_empty()
    }
    /// Unit ids in file order.
    pub fn units(&self) -> &[String] {
        &self.units
    }
    /// Group names in order of first appearance.
    pub fn groups(&self) -> &[String] {
        &self.groups
    }
    /// Group index of each unit.
    pub fn group_of(&self) -> &[u32] {
        &self.group_of
    }
    /// Whether each unit was exposed (false = anchored at the reference time).
    pub fn exposed(&self) -> &[bool] {
        &self.exposed
    }
    /// Exposure (or reference) instant of each unit, before anchoring.
    pub fn times(&self) -> &[i64] {
        &self.time
    }
    /// Unit index of an id.
    pub fn index_of(&self, unit: &str) -> Option<u32> {
        self.index.get(unit)
    }
    /// The map from id to index.
    pub fn map(&self) -> &UnitMap {
        &self.index
    }
    /// What the result records about the exposures file, if read from one.
    pub fn info(&self) -> Option<&InputInfo> {
        self.info.as_ref()
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::hash::BuildHasher;

    #[test]
    fn similar_ids_spread_over_buckets() {
        // Ids that differ only in their last digits must not share the low (bucket) bits.
        let b = BuildHasherDefault::<UnitHasher>::default();
        let mut low: std::collections::HashSet<u64> = std::collections::HashSet::new();
        for i in 0..4096u32 {
            low.insert(b.hash_one(format!("u{i:07}").as_str()) & 0xfff);
        }
        assert!(low.len() > 2000, "only {} distinct bucket indices of 4096", low.len());
    }
}
