//! Typed columns: what the readers keep of a file, one column at a time.
//!
//! A column read as [`ColumnKind::Number`] holds one `f64` per row; a cell that is not a clean
//! finite number (empty, `NA`, text, `NaN`, `inf`) holds `NaN` there and keeps its text in a
//! short list of exceptions, so nothing of the file is lost and every message can quote the cell
//! as written. A column read as [`ColumnKind::Text`] is dictionary-encoded: one `u32` code per
//! row and each distinct text once, in order of first appearance.

use crate::table::parse_number_text;
use std::borrow::Cow;
use std::collections::HashMap;

/// How a column is to be kept.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum ColumnKind {
    /// Numbers (with the text of every other cell kept aside).
    Number,
    /// Text, dictionary-encoded (ids, categories, dates, treatment labels).
    Text,
}

/// Distinct texts of a column in order of first appearance.
#[derive(Debug, Clone, Default)]
pub struct Dictionary {
    levels: Vec<Box<str>>,
    index: HashMap<Box<str>, u32>,
}

impl Dictionary {
    /// The code of `text`, adding it when new.
    pub fn code(&mut self, text: &str) -> u32 {
        if let Some(&c) = self.index.get(text) {
            return c;
        }
        let c = self.levels.len() as u32;
        self.levels.push(text.into());
        self.index.insert(text.into(), c);
        c
    }

    /// The text of a code.
    pub fn level(&self, code: u32) -> &str {
        &self.levels[code as usize]
    }

    /// Every distinct text, in order of first appearance.
    pub fn levels(&self) -> &[Box<str>] {
        &self.levels
    }

    /// Number of distinct texts.
    pub fn len(&self) -> usize {
        self.levels.len()
    }

    /// Whether no text has been seen.
    pub fn is_empty(&self) -> bool {
        self.levels.is_empty()
    }

    /// Drop the lookup table once the column is complete (it is only needed while reading).
    fn seal(&mut self) {
        self.index = HashMap::new();
    }
}

/// A numeric column: values, with the text of every cell that is not a finite number kept aside.
#[derive(Debug, Clone, Default)]
pub struct NumberColumn {
    values: Vec<f64>,
    /// (row, code into `texts`), rows ascending.
    exceptions: Vec<(u32, u32)>,
    texts: Dictionary,
}

impl NumberColumn {
    /// Values, `NaN` where the cell is not a finite number.
    pub fn values(&self) -> &[f64] {
        &self.values
    }

    /// The text of row `r` when it is not a clean finite number.
    pub fn exception(&self, r: usize) -> Option<&str> {
        if self.values[r].is_finite() {
            return None;
        }
        let r = r as u32;
        self.exceptions.binary_search_by_key(&r, |e| e.0).ok().map(|i| self.texts.level(self.exceptions[i].1))
    }

    /// Number of cells that are not finite numbers (empty cells included).
    pub fn exception_count(&self) -> usize {
        self.exceptions.len()
    }

    /// Rows and texts of the cells that are not finite numbers, rows ascending.
    pub fn exceptions(&self) -> impl Iterator<Item = (usize, &str)> {
        self.exceptions.iter().map(|&(r, c)| (r as usize, self.texts.level(c)))
    }

    /// Take the values out (the column is left empty).
    pub fn take_values(&mut self) -> Vec<f64> {
        std::mem::take(&mut self.values)
    }
}

/// A dictionary-encoded text column.
#[derive(Debug, Clone, Default)]
pub struct TextColumn {
    codes: Vec<u32>,
    dict: Dictionary,
}

impl TextColumn {
    /// The code of each row.
    pub fn codes(&self) -> &[u32] {
        &self.codes
    }

    /// The distinct texts.
    pub fn dictionary(&self) -> &Dictionary {
        &self.dict
    }

    /// The text of row `r`.
    pub fn get(&self, r: usize) -> &str {
        self.dict.level(self.codes[r])
    }
}

/// One column of a table.
#[derive(Debug, Clone)]
pub enum Column {
    /// Kept as numbers.
    Number(NumberColumn),
    /// Kept as dictionary-encoded text.
    Text(TextColumn),
}

impl Column {
    /// An empty column of a kind.
    pub fn new(kind: ColumnKind) -> Self {
        match kind {
            ColumnKind::Number => Column::Number(NumberColumn::default()),
            ColumnKind::Text => Column::Text(TextColumn::default()),
        }
    }

    /// Number of rows.
    pub fn len(&self) -> usize {
        match self {
            Column::Number(c) => c.values.len(),
            Column::Text(c) => c.codes.len(),
        }
    }

    /// Whether the column has no rows.
    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    /// Append one cell given as (trimmed) text.
    pub fn push(&mut self, text: &str) {
        match self {
            Column::Number(c) => match parse_number_text(text) {
                Ok(Some(v)) => c.values.push(v),
                _ => {
                    let row = c.values.len() as u32;
                    c.values.push(f64::NAN);
                    let code = c.texts.code(text);
                    c.exceptions.push((row, code));
                }
            },
            Column::Text(c) => {
                let code = c.dict.code(text);
                c.codes.push(code);
            }
        }
    }

    /// Append one cell given as raw bytes of a CSV field (untrimmed). A plain number is parsed
    /// straight from the bytes; anything else goes through its text as [`Column::push`] does.
    /// Returns `false` when the bytes are not UTF-8.
    pub fn push_field(&mut self, bytes: &[u8]) -> bool {
        if let Column::Number(c) = self {
            let t = bytes.trim_ascii();
            // fast path: the same numbers std's parser accepts (see the test below); every other
            // cell, NaN and infinities included, takes the text path
            if let Some(&b0) = t.first()
                && (b0.is_ascii_digit() || b0 == b'-' || b0 == b'+' || b0 == b'.')
                && let Ok(v) = fast_float2::parse::<f64, _>(t)
                && v.is_finite()
            {
                c.values.push(v);
                return true;
            }
        }
        match std::str::from_utf8(bytes) {
            Ok(s) => {
                self.push(s.trim());
                true
            }
            Err(_) => false,
        }
    }

    /// Append one number that was never text (a numeric Parquet cell).
    pub fn push_number(&mut self, v: f64) {
        match self {
            Column::Number(c) if v.is_finite() => c.values.push(v),
            _ => self.push(&format_number(v)),
        }
    }

    /// Append another part of the same column (the next chunk of the file).
    pub fn append(&mut self, part: Column) {
        match (self, part) {
            (Column::Number(a), Column::Number(b)) => {
                let offset = a.values.len() as u32;
                let remap: Vec<u32> = b.texts.levels.iter().map(|t| a.texts.code(t)).collect();
                a.exceptions.extend(b.exceptions.iter().map(|&(r, c)| (r + offset, remap[c as usize])));
                a.values.extend_from_slice(&b.values);
            }
            (Column::Text(a), Column::Text(b)) => {
                let remap: Vec<u32> = b.dict.levels.iter().map(|t| a.dict.code(t)).collect();
                a.codes.extend(b.codes.iter().map(|&c| remap[c as usize]));
            }
            // parts of one column are always built with the same kind
            (a, b) => {
                for r in 0..b.len() {
                    a.push(&b.text(r));
                }
            }
        }
    }

    /// Finish reading: drop lookup tables and spare capacity.
    pub fn seal(&mut self) {
        match self {
            Column::Number(c) => {
                c.texts.seal();
                c.values.shrink_to_fit();
                c.exceptions.shrink_to_fit();
            }
            Column::Text(c) => {
                c.dict.seal();
                c.codes.shrink_to_fit();
            }
        }
    }

    /// The cell as text: as written for text columns and for numeric cells that are not finite
    /// numbers; a finite number is shown in its shortest exact form.
    pub fn text(&self, r: usize) -> Cow<'_, str> {
        match self {
            Column::Text(c) => Cow::Borrowed(c.get(r)),
            Column::Number(c) => match c.exception(r) {
                Some(t) => Cow::Borrowed(t),
                None => Cow::Owned(format_number(c.values[r])),
            },
        }
    }

    /// The cell as a number: `Ok(None)` for empty and NA-like cells; `Err(true)` for NaN and
    /// infinities, `Err(false)` for other text (as [`parse_number_text`]).
    pub fn number(&self, r: usize) -> Result<Option<f64>, bool> {
        match self {
            Column::Number(c) => {
                let v = c.values[r];
                if v.is_finite() { Ok(Some(v)) } else { parse_number_text(c.exception(r).unwrap_or("")) }
            }
            Column::Text(c) => parse_number_text(c.get(r)),
        }
    }
}

/// A finite number in its shortest exact form (`1`, `0.1`, `2.5e-8`); other values by name.
pub fn format_number(v: f64) -> String {
    if v.is_nan() {
        "NaN".into()
    } else if v.is_infinite() {
        if v > 0.0 { "inf".into() } else { "-inf".into() }
    } else {
        format!("{v}")
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn number_columns_keep_the_text_of_every_other_cell() {
        let mut c = Column::new(ColumnKind::Number);
        for t in ["1.5", "", "NA", "abc", "NaN", "-2"] {
            c.push(t);
        }
        assert_eq!(c.number(0), Ok(Some(1.5)));
        assert_eq!(c.number(1), Ok(None));
        assert_eq!(c.number(2), Ok(None));
        assert_eq!(c.number(3), Err(false));
        assert_eq!(c.number(4), Err(true));
        assert_eq!(c.number(5), Ok(Some(-2.0)));
        assert_eq!(c.text(2), "NA");
        assert_eq!(c.text(3), "abc");
        assert_eq!(c.text(0), "1.5");
    }

    /// The fast byte parser must agree with std's `str::parse::<f64>` (the reference every
    /// other reader path uses) on what is a number and on its value.
    #[test]
    fn field_fast_path_agrees_with_std_parsing() {
        let cases = [
            "1",
            "-1",
            "+1",
            "1.",
            ".5",
            "-.5",
            "+.5",
            "1e5",
            "1E+05",
            "1e-5",
            "1.5e",
            "1e",
            "e5",
            ".",
            "-",
            "+",
            "--1",
            "1..2",
            "1.2.3",
            "0x10",
            "1_000",
            "1,0",
            " 7 ",
            "\t8",
            "007",
            "-0",
            "0.1",
            "1e400",
            "-1e400",
            "1e-400",
            "inf",
            "-inf",
            "nan",
            "NaN",
            "infinity",
            "NA",
            "",
            "   ",
            "12a",
            "a12",
            "1 2",
            "٣",
            "9007199254740993",
            "2.2250738585072011e-308",
            "1.7976931348623157e308",
            "4.9e-324",
            "0.30000000000000004",
            "123456789012345678901234567890",
            "1.00000000000000011102230246251565404236316680908203125",
        ];
        for s in cases {
            let mut fast = Column::new(ColumnKind::Number);
            assert!(fast.push_field(s.as_bytes()));
            let mut slow = Column::new(ColumnKind::Number);
            slow.push(s.trim());
            let (a, b) = (fast.number(0), slow.number(0));
            assert_eq!(a.map(|o| o.map(f64::to_bits)), b.map(|o| o.map(f64::to_bits)), "{s:?}");
            assert_eq!(fast.text(0), slow.text(0), "{s:?}");
            // and std's parser is the reference of the slow path
            if let Ok(Some(v)) = b {
                assert_eq!(s.trim().parse::<f64>().map(f64::to_bits), Ok(v.to_bits()), "{s:?}");
            }
        }
    }

    #[test]
    fn appended_parts_share_one_dictionary_in_order_of_first_appearance() {
        let mut a = Column::new(ColumnKind::Text);
        for t in ["b", "a", "b"] {
            a.push(t);
        }
        let mut b = Column::new(ColumnKind::Text);
        for t in ["c", "a", "c"] {
            b.push(t);
        }
        a.append(b);
        let Column::Text(t) = &a else { panic!("text column expected") };
        let levels: Vec<&str> = t.dictionary().levels().iter().map(|l| &**l).collect();
        assert_eq!(levels, ["b", "a", "c"]);
        assert_eq!(t.codes(), [0, 1, 0, 2, 1, 2]);
        let mut n = Column::new(ColumnKind::Number);
        n.push("x");
        let mut m = Column::new(ColumnKind::Number);
        m.push("1");
        m.push("y");
        n.append(m);
        assert_eq!(n.text(2), "y");
        assert_eq!(n.number(1), Ok(Some(1.0)));
    }
}
