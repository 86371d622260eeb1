//! The columnar readers against what was written: random tables written as CSV (quoting, CRLF,
//! byte-order mark, empty cells, blank lines) and as Parquet (small row groups, nulls) read back
//! equal, cell by cell, for block and chunk sizes down to a few bytes. The reference for CSV is
//! the plain sequential reader (`sequential_records`, the csv crate's record reader), which is
//! also what describes problems in a file's shape; for Parquet it is the values written.

use aftercast_core::column::ColumnKind;
use aftercast_core::csv_read::{CsvChunking, sequential_records};
use aftercast_core::table::{Projection, RawTable, parse_number_text};
use proptest::prelude::*;
use std::path::Path;

/// One cell's text (as the reader should give it back: trimmed).
fn cell() -> impl Strategy<Value = String> {
    prop_oneof![
        // numbers written in several ways
        (-1e6f64..1e6).prop_map(|v| format!("{v}")),
        (-1000i64..1000).prop_map(|v| v.to_string()),
        (0.0f64..1.0).prop_map(|v| format!("{v:.3e}")),
        Just(String::new()),
        Just("NA".to_string()),
        Just("nan".to_string()),
        Just("-inf".to_string()),
        // text that needs quoting: separators, quotes, line ends inside
        "[a-z]{1,6}",
        "[a-z ]{0,3}[,\"][a-z\"]{0,3}",
        "[a-z]{1,3}\n[a-z]{0,3}",
        "[a-z]{1,3}\r\n[a-z]{1,3}",
        Just("é ✓ 数".to_string()),
    ]
    .prop_map(|s| s.trim().to_string())
}

#[derive(Debug, Clone)]
struct Written {
    header: Vec<String>,
    rows: Vec<Vec<String>>,
    bom: bool,
    crlf: bool,
    final_newline: bool,
    blank_after: Vec<bool>,
    padded: Vec<bool>,
}

fn table() -> impl Strategy<Value = Written> {
    (1usize..5, 0usize..25).prop_flat_map(|(ncols, nrows)| {
        (
            proptest::collection::vec(proptest::collection::vec(cell(), ncols), nrows),
            any::<bool>(),
            any::<bool>(),
            any::<bool>(),
            proptest::collection::vec(proptest::bool::weighted(0.15), nrows),
            proptest::collection::vec(proptest::bool::weighted(0.3), nrows * ncols),
        )
            .prop_map(move |(rows, bom, crlf, final_newline, blank_after, padded)| Written {
                header: (0..ncols).map(|c| format!("col {c}")).collect(),
                rows,
                bom,
                crlf,
                final_newline,
                blank_after,
                padded,
            })
    })
}

fn quote(s: &str) -> String {
    if s.contains([',', '"', '\n', '\r']) || s.starts_with(' ') || s.ends_with(' ') {
        format!("\"{}\"", s.replace('"', "\"\""))
    } else {
        s.to_string()
    }
}

/// The file, and the line each row starts on (1 + the line ends written before it).
fn write_csv(w: &Written) -> (Vec<u8>, Vec<u64>) {
    let nl = if w.crlf { "\r\n" } else { "\n" };
    let mut out = String::new();
    let mut lines = Vec::new();
    if w.bom {
        out.push('\u{feff}');
    }
    out.push_str(&w.header.iter().map(|h| quote(h)).collect::<Vec<_>>().join(","));
    for (r, row) in w.rows.iter().enumerate() {
        out.push_str(nl);
        lines.push(1 + out.matches('\n').count() as u64);
        let cells: Vec<String> = row
            .iter()
            .enumerate()
            .map(|(c, v)| {
                let q = quote(v);
                // spaces around an unquoted cell are trimmed by the reader
                if w.padded.get(r * w.header.len() + c).copied().unwrap_or(false) && !q.starts_with('"') {
                    format!("  {q} ")
                } else {
                    q
                }
            })
            .collect();
        out.push_str(&cells.join(","));
        if w.blank_after[r] {
            out.push_str(nl);
        }
    }
    if w.final_newline {
        out.push_str(nl);
    }
    (out.into_bytes(), lines)
}

/// A one-column table whose only cell is empty is a blank line to every reader; such tables
/// cannot be written as CSV and are left out.
fn writable(w: &Written) -> bool {
    !(w.header.len() == 1 && w.rows.iter().any(|r| r[0].is_empty()))
}

fn check_csv(w: &Written, chunking: CsvChunking) -> Result<(), TestCaseError> {
    let (bytes, written_lines) = write_csv(w);
    let path = Path::new("generated.csv");
    let (header, rows) = sequential_records(path, &bytes).expect("the reference reads what was written");
    prop_assert_eq!(&header, &w.header);
    prop_assert_eq!(rows.iter().map(|(l, _)| *l).collect::<Vec<_>>(), written_lines, "lines of the sequential reader");
    let texts: Vec<&Vec<String>> = rows.iter().map(|(_, r)| r).collect();
    prop_assert_eq!(texts, w.rows.iter().collect::<Vec<_>>());
    let mixed = (0..w.header.len())
        .fold(Projection::none(), |p, c| if c % 2 == 0 { p.text(&w.header[c]) } else { p.number(&w.header[c]) });
    for projection in [Projection::all(ColumnKind::Text), Projection::all(ColumnKind::Number), mixed] {
        let got = RawTable::from_csv_bytes_with(path, &bytes, &projection, chunking);
        if rows.is_empty() {
            prop_assert!(got.is_err(), "a file without rows is refused");
            continue;
        }
        let t = got.map_err(|e| TestCaseError::fail(e.to_string()))?;
        prop_assert_eq!(t.header(), &header[..]);
        prop_assert_eq!(t.row_count(), rows.len());
        for (r, (line, cells)) in rows.iter().enumerate() {
            prop_assert_eq!(t.line(r), *line, "line of row {}", r);
            for (c, text) in cells.iter().enumerate() {
                let want = parse_number_text(text);
                prop_assert_eq!(t.data(c).number(r), want, "row {} column {}: {:?}", r, c, text);
                // a text column gives the text back as written; a numeric one does for every
                // cell that is not a plain finite number
                if matches!(want, Ok(Some(_))) && t.data(c).text(r) != text.as_str() {
                    prop_assert!(
                        matches!(t.data(c), aftercast_core::Column::Number(_)),
                        "text column changed {:?}",
                        text
                    );
                } else {
                    prop_assert_eq!(t.text(r, c).into_owned(), text.clone());
                }
            }
        }
        // the hash is the file's, whatever the blocks
        let whole = RawTable::from_csv_bytes(path, &bytes).map_err(|e| TestCaseError::fail(e.to_string()))?;
        prop_assert_eq!(t.info().sha256, whole.info().sha256);
    }
    Ok(())
}

proptest! {
    #![proptest_config(ProptestConfig { cases: 200, ..ProptestConfig::default() })]

    #[test]
    fn csv_reads_back_what_was_written_for_any_chunking(
        w in table().prop_filter("writable as CSV", writable),
        block in 1usize..64,
        min_chunk in 1usize..16,
    ) {
        check_csv(&w, CsvChunking { block, min_chunk })?;
        check_csv(&w, CsvChunking::default())?;
    }

    #[test]
    fn shape_errors_are_the_sequential_readers_for_any_chunking(
        w in table().prop_filter("rows to break", |w| !w.rows.is_empty() && writable(w)),
        which in any::<prop::sample::Index>(),
        block in 1usize..64,
    ) {
        // one row loses its last field (or gains one): a ragged row
        let mut broken = w.clone();
        let r = which.index(broken.rows.len());
        if broken.rows[r].len() > 1 { broken.rows[r].pop(); } else { broken.rows[r].push("x".into()); }
        let (bytes, _) = write_csv(&broken);
        let path = Path::new("generated.csv");
        // (a row left with one empty field is a blank line, which every reader skips)
        let want = sequential_records(path, &bytes).map(|_| ());
        prop_assume!(want.is_err());
        let want = want.expect_err("ragged").to_string();
        let got = RawTable::from_csv_bytes_with(path, &bytes, &Projection::all(ColumnKind::Number), CsvChunking { block, min_chunk: 1 })
            .map(|_| ()).expect_err("ragged").to_string();
        prop_assert_eq!(got, want);
    }
}

#[test]
fn not_utf8_anywhere_is_located_as_before_even_in_a_column_not_read() {
    let mut bytes = b"a,b\n1,2\n3,4\n".to_vec();
    bytes.extend_from_slice(b"5,\xff\xfe\n6,7\n");
    let path = Path::new("latin1.csv");
    let want = sequential_records(path, &bytes).map(|_| ()).expect_err("not UTF-8").to_string();
    for block in [1, 3, 7, 1 << 20] {
        let got = RawTable::from_csv_bytes_with(
            path,
            &bytes,
            &Projection::none().number("a"),
            CsvChunking { block, min_chunk: 1 },
        )
        .map(|_| ())
        .expect_err("not UTF-8")
        .to_string();
        assert_eq!(got, want);
        assert!(got.contains("line 4, column 2 ('b')") && got.contains("not valid UTF-8"), "{got}");
    }
}

#[test]
fn a_missing_column_is_refused_when_the_header_is_read() {
    // the ragged row further down is never reached: the header already says what is wrong
    let bytes = b"date,orders\n2024-01-01,1\n2024-01-02,2,3\n";
    let err = RawTable::from_csv_bytes_with(
        Path::new("s.csv"),
        bytes,
        &Projection::none().text("date").number("order"),
        CsvChunking::default(),
    )
    .map(|_| ())
    .expect_err("no such column")
    .to_string();
    assert!(err.contains("no column named 'order'") && err.contains("date, orders"), "{err}");
}

#[test]
fn other_formats_given_as_csv_are_recognised() {
    for (bytes, hint) in
        [(&b"PAR1\x15\x04"[..], ".parquet"), (&b"\x1f\x8b\x08\x00"[..], "gzip"), (&b"PK\x03\x04"[..], "zip")]
    {
        let err = RawTable::from_csv_bytes(Path::new("x.csv"), bytes).map(|_| ()).expect_err("not CSV").to_string();
        assert!(err.contains(hint), "{err}");
    }
}

#[cfg(feature = "parquet")]
mod parquet_tables {
    use super::*;
    use arrow_array::{ArrayRef, Float64Array, Int64Array, RecordBatch, StringArray};
    use parquet::arrow::ArrowWriter;
    use parquet::file::properties::WriterProperties;
    use std::sync::Arc;

    fn write(
        dir: &Path,
        f: &[Option<f64>],
        i: &[Option<i64>],
        s: &[Option<String>],
        group: usize,
    ) -> std::path::PathBuf {
        let batch = RecordBatch::try_from_iter([
            ("f", Arc::new(Float64Array::from(f.to_vec())) as ArrayRef),
            ("i", Arc::new(Int64Array::from(i.to_vec())) as ArrayRef),
            ("s", Arc::new(StringArray::from(s.to_vec())) as ArrayRef),
        ])
        .expect("batch");
        let path = dir.join("t.parquet");
        let props = WriterProperties::builder().set_max_row_group_row_count(Some(group)).build();
        let file = std::fs::File::create(&path).expect("create");
        let mut w = ArrowWriter::try_new(file, batch.schema(), Some(props)).expect("writer");
        w.write(&batch).expect("write");
        w.close().expect("close");
        path
    }

    proptest! {
        #![proptest_config(ProptestConfig { cases: 60, ..ProptestConfig::default() })]

        #[test]
        fn parquet_reads_back_what_was_written_row_group_by_row_group(
            rows in proptest::collection::vec(
                (proptest::option::weighted(0.8, -1e9f64..1e9), proptest::option::weighted(0.8, any::<i32>()), proptest::option::weighted(0.8, "[a-z,\" ]{0,6}")),
                1..40),
            group in 1usize..8,
        ) {
            let dir = tempfile::tempdir().expect("dir");
            let f: Vec<Option<f64>> = rows.iter().map(|r| r.0).collect();
            let i: Vec<Option<i64>> = rows.iter().map(|r| r.1.map(i64::from)).collect();
            let s: Vec<Option<String>> = rows.iter().map(|r| r.2.clone()).collect();
            let path = write(dir.path(), &f, &i, &s, group);
            let projected = Projection::none().number("f").number("i").text("s");
            let t = RawTable::read_columns(&path, &projected).map_err(|e| TestCaseError::fail(e.to_string()))?;
            prop_assert_eq!(t.row_count(), rows.len());
            let (fc, ic, sc) = (t.column("f").unwrap(), t.column("i").unwrap(), t.column("s").unwrap());
            for r in 0..rows.len() {
                prop_assert_eq!(t.line(r), r as u64 + 2);
                prop_assert_eq!(t.parse_number(r, fc).ok().flatten(), f[r]);
                prop_assert_eq!(t.parse_number(r, ic).ok().flatten(), i[r].map(|v| v as f64));
                prop_assert_eq!(t.text(r, sc).into_owned(), s[r].as_deref().map(str::trim).unwrap_or("").to_string());
            }
            // only the named columns are kept
            let only = RawTable::read_columns(&path, &Projection::none().number("i")).map_err(|e| TestCaseError::fail(e.to_string()))?;
            prop_assert!(only.kept(only.column("i").unwrap()) && !only.kept(only.column("f").unwrap()));
            prop_assert_eq!(only.info().sha256, t.info().sha256);
        }
    }
}
