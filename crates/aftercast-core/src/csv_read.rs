//! CSV into typed columns: streamed in blocks, hashed as read, parsed in parallel chunks.
//!
//! The file is read block by block (never whole). Each block is cut at the last record
//! boundary; the complete records are split into chunks at record boundaries and parsed on the
//! worker threads, each chunk into its own typed column parts, which are then appended in file
//! order. A record boundary is a line end outside quotes: files without a quote character are
//! cut at any line end; in a block that holds quotes a small state machine, the same as the CSV
//! tokenizer's (RFC 4180 quoting with doubled quotes), follows the quoting byte by byte, so a
//! quoted field that spans lines is never cut. The SHA-256 of the bytes is computed on the same
//! blocks while the previous block is parsed.
//!
//! The fast path only checks what it must to stay correct. When a chunk meets anything wrong
//! with the file's shape (a row with the wrong number of fields, text that is not UTF-8, a CSV
//! syntax error), that chunk is read again by the plain sequential reader, which describes the
//! problem exactly as it always has: every chunk before it was read, so it is the file's first
//! such problem. A problem in the header is described from the bytes read so far.

use crate::column::{Column, ColumnKind};
use crate::error::{DataError, DataResult, Location};
use sha2::{Digest, Sha256};
use std::io::Read;
use std::path::Path;

/// Block and chunk sizes of the streaming reader.
#[derive(Debug, Clone, Copy)]
pub struct CsvChunking {
    /// Bytes read from the file at a time.
    pub block: usize,
    /// Smallest chunk handed to one worker (smaller blocks are parsed as one chunk).
    pub min_chunk: usize,
}

impl Default for CsvChunking {
    fn default() -> Self {
        CsvChunking { block: 8 << 20, min_chunk: 256 << 10 }
    }
}

/// Row line numbers: regular (`first + row`) unless blank lines or multi-line records intervene.
#[derive(Debug, Clone)]
pub enum Lines {
    /// Row `r` is on line `first + r`.
    Regular {
        /// Line of row 0.
        first: u64,
    },
    /// One line number per row.
    Explicit(Vec<u64>),
}

impl Lines {
    /// Line of row `r`.
    pub fn get(&self, r: usize) -> u64 {
        match self {
            Lines::Regular { first } => first + r as u64,
            Lines::Explicit(v) => v[r],
        }
    }
}

struct LineBuilder {
    first: Option<u64>,
    n: usize,
    explicit: Option<Vec<u64>>,
}

impl LineBuilder {
    fn push(&mut self, line: u64) {
        match (&mut self.explicit, self.first) {
            (Some(v), _) => v.push(line),
            (None, None) => self.first = Some(line),
            (None, Some(f)) if f + self.n as u64 == line => {}
            (None, Some(f)) => {
                let mut v: Vec<u64> = (0..self.n as u64).map(|r| f + r).collect();
                v.push(line);
                self.explicit = Some(v);
            }
        }
        self.n += 1;
    }

    fn finish(self) -> Lines {
        match self.explicit {
            Some(v) => Lines::Explicit(v),
            None => Lines::Regular { first: self.first.unwrap_or(2) },
        }
    }
}

/// A CSV file read into columns.
pub(crate) struct CsvColumns {
    pub header: Vec<String>,
    pub columns: Vec<Option<Column>>,
    pub lines: Lines,
    pub rows: usize,
    pub sha256: String,
}

/// Something is wrong with the file's shape; the sequential reader will say what.
struct ShapeProblem;

/// Tokenizer states for finding record boundaries (RFC 4180 quoting, doubled quotes).
#[derive(Clone, Copy, PartialEq, Eq)]
enum Quote {
    FieldStart,
    Unquoted,
    Quoted,
    AfterClosing,
}

/// Whether the `\n` at `i` ends a line that is not empty. The CSV reader gives a record the
/// line where it began looking for it, which is before any empty lines that precede the record;
/// a chunk therefore never starts behind an empty line, so that every record keeps the line the
/// sequential reader gives it.
fn ends_filled_line(bytes: &[u8], i: usize) -> bool {
    let j = if i > 0 && bytes[i - 1] == b'\r' { i - 1 } else { i };
    j > 0 && bytes[j - 1] != b'\n' && bytes[j - 1] != b'\r'
}

/// Ends of records (positions just after a `\n` that ends a record) in `bytes`, which begins at
/// a record start: one at or after every multiple of `step`, and the last one in `bytes`.
fn record_ends(bytes: &[u8], step: usize) -> Vec<usize> {
    let mut cuts = Vec::new();
    let mut next = step;
    if !bytes.contains(&b'"') {
        let mut pos = 0;
        while pos < bytes.len() {
            let from = pos.max(next.min(bytes.len()));
            match bytes[from..].iter().enumerate().position(|(q, &b)| b == b'\n' && ends_filled_line(bytes, from + q)) {
                Some(i) => {
                    pos = from + i + 1;
                    cuts.push(pos);
                    next = pos + step;
                }
                None => break,
            }
        }
        if let Some(last) = (0..bytes.len()).rev().find(|&i| bytes[i] == b'\n' && ends_filled_line(bytes, i))
            && cuts.last() != Some(&(last + 1))
        {
            cuts.push(last + 1);
        }
        return cuts;
    }
    let mut state = Quote::FieldStart;
    let mut last_end = None;
    for (i, &b) in bytes.iter().enumerate() {
        state = match (state, b) {
            (Quote::FieldStart, b'"') => Quote::Quoted,
            (Quote::Quoted, b'"') => Quote::AfterClosing,
            (Quote::Quoted, _) => Quote::Quoted,
            (Quote::AfterClosing, b'"') => Quote::Quoted,
            (_, b',') | (_, b'\r') => Quote::FieldStart,
            (_, b'\n') => {
                if ends_filled_line(bytes, i) {
                    if i + 1 >= next {
                        cuts.push(i + 1);
                        next = i + 1 + step;
                    }
                    last_end = Some(i + 1);
                }
                Quote::FieldStart
            }
            _ => Quote::Unquoted,
        };
    }
    if let Some(end) = last_end
        && cuts.last() != Some(&end)
    {
        cuts.push(end);
    }
    cuts
}

/// The line a record is on: 1 + the line ends before its first byte. (The CSV reader's own
/// record position is where it began looking for the record: before the empty lines that
/// precede it, and with CRLF line ends before the previous record's `\n`, one line too early.)
struct LineCounter {
    pos: usize,
    line: u64,
}

impl LineCounter {
    fn new() -> Self {
        LineCounter { pos: 0, line: 1 }
    }

    /// The line of the record the reader began looking for at byte `from` of `bytes`.
    fn record_line(&mut self, bytes: &[u8], from: usize) -> u64 {
        let mut start = from.max(self.pos);
        while start < bytes.len() && (bytes[start] == b'\n' || bytes[start] == b'\r') {
            start += 1;
        }
        self.line += bytes[self.pos..start].iter().filter(|&&b| b == b'\n').count() as u64;
        self.pos = start;
        self.line
    }
}

struct ChunkOut {
    columns: Vec<Option<Column>>,
    /// Line of each row, counted from the chunk's start (its first line is 1).
    lines: Vec<u64>,
    /// Line ends in the chunk.
    line_ends: u64,
}

fn reader(bytes: &[u8]) -> csv::Reader<&[u8]> {
    csv::ReaderBuilder::new().has_headers(false).flexible(true).trim(csv::Trim::None).from_reader(bytes)
}

/// Parse complete records.
fn parse_chunk(bytes: &[u8], width: usize, kinds: &[Option<ColumnKind>]) -> Result<ChunkOut, ShapeProblem> {
    if std::str::from_utf8(bytes).is_err() {
        return Err(ShapeProblem);
    }
    let mut columns: Vec<Option<Column>> = kinds.iter().map(|k| k.map(Column::new)).collect();
    let mut lines = Vec::new();
    let mut rdr = reader(bytes);
    let mut rec = csv::ByteRecord::new();
    let mut counter = LineCounter::new();
    loop {
        match rdr.read_byte_record(&mut rec) {
            Ok(true) => {}
            Ok(false) => break,
            Err(_) => return Err(ShapeProblem),
        }
        if rec.len() == 1 && field(&rec, 0)?.is_empty() {
            continue;
        }
        if rec.len() != width {
            return Err(ShapeProblem);
        }
        lines.push(counter.record_line(bytes, rec.position().map_or(0, |p| p.byte() as usize)));
        for (c, col) in columns.iter_mut().enumerate() {
            if let Some(col) = col
                && !col.push_field(&rec[c])
            {
                return Err(ShapeProblem);
            }
        }
    }
    let line_ends = bytes.iter().filter(|&&b| b == b'\n').count() as u64;
    Ok(ChunkOut { columns, lines, line_ends })
}

fn field(rec: &csv::ByteRecord, i: usize) -> Result<&str, ShapeProblem> {
    std::str::from_utf8(&rec[i]).map(str::trim).map_err(|_| ShapeProblem)
}

/// Which columns to keep, and how, given the header (refusing a header that lacks one).
pub(crate) type KindsOf<'a> = dyn Fn(&[String]) -> DataResult<Vec<Option<ColumnKind>>> + 'a;

/// Read a CSV stream into the columns `wanted` picks from the header (`None` = not kept).
pub(crate) fn read_csv(
    path: &Path,
    mut input: impl Read + Send,
    wanted: &KindsOf,
    chunking: CsvChunking,
    size: Option<u64>,
) -> DataResult<CsvColumns> {
    let stage = crate::progress::stage(format!("reading {}", path.display()), size);
    let io = |source| DataError::Io { path: path.to_path_buf(), source };
    let block = chunking.block.max(1);
    let mut hasher = Sha256::new();
    let mut buf: Vec<u8> = Vec::with_capacity(block + (block >> 2));
    let mut eof = read_more(&mut input, &mut buf, block, &mut hasher).map_err(io)?;
    stage.advance(buf.len() as u64);
    while !eof && buf.len() < 3 {
        let had = buf.len();
        eof = read_more(&mut input, &mut buf, block, &mut hasher).map_err(io)?;
        stage.advance((buf.len() - had) as u64);
    }
    let bom = if buf.starts_with(&[0xEF, 0xBB, 0xBF]) { 3 } else { 0 };
    if let Some(hint) = other_format(&buf) {
        return Err(DataError::Malformed { at: Location::file(path), format: "CSV", message: hint.into() });
    }
    // a problem in the header: the sequential reader describes it from what has been read
    let header_problem = |buf: &[u8]| -> DataError {
        match sequential_records(path, buf) {
            Err(e) => e,
            Ok(_) => DataError::Malformed {
                at: Location::line(path, 1),
                format: "CSV",
                message: "the header could not be read".into(),
            },
        }
    };
    // The header: the first record that is not blank, complete in the buffer.
    let (header, mut consumed, mut lines_before) = loop {
        let body = &buf[bom..];
        let mut rdr = reader(body);
        let mut rec = csv::ByteRecord::new();
        let mut found = None;
        loop {
            match rdr.read_byte_record(&mut rec) {
                Ok(true) => {}
                Ok(false) => break,
                Err(_) => return Err(header_problem(&buf)),
            }
            let fields: Result<Vec<String>, ShapeProblem> =
                (0..rec.len()).map(|i| field(&rec, i).map(str::to_string)).collect();
            let Ok(fields) = fields else { return Err(header_problem(&buf)) };
            if fields.len() == 1 && fields[0].is_empty() {
                continue;
            }
            let end = rdr.position().byte() as usize;
            found = Some((fields, end, body[..end].iter().filter(|&&b| b == b'\n').count() as u64));
            break;
        }
        match found {
            // a header that reaches the end of the buffer may continue past it
            Some((h, end, lines)) if eof || end < body.len() => break (h, bom + end, lines),
            None if eof => return Err(DataError::EmptyFile { path: path.to_path_buf() }),
            _ => {
                let had = buf.len();
                eof = read_more(&mut input, &mut buf, block, &mut hasher).map_err(io)?;
                stage.advance((buf.len() - had) as u64);
            }
        }
    };
    let width = header.len();
    let kinds = wanted(&header)?;
    let mut columns: Vec<Option<Column>> = kinds.iter().map(|k| k.map(Column::new)).collect();
    let mut lines = LineBuilder { first: None, n: 0, explicit: None };
    let threads = rayon::current_num_threads().max(1);
    // The next block is read behind a reserved front, where the unfinished record of the
    // current block is put, so blocks are never copied whole.
    const FRONT: usize = 256 << 10;
    let mut spare: Vec<u8> = Vec::with_capacity(FRONT + block);
    // chunks parsed but not yet appended (they are appended while the next block is parsed)
    let mut parsed: Vec<ChunkOut> = Vec::new();
    let merge =
        |parts: Vec<ChunkOut>, columns: &mut Vec<Option<Column>>, lines: &mut LineBuilder, lines_before: &mut u64| {
            for part in parts {
                for l in part.lines {
                    lines.push(*lines_before + l);
                }
                *lines_before += part.line_ends;
                for (col, piece) in columns.iter_mut().zip(part.columns) {
                    if let (Some(col), Some(piece)) = (col.as_mut(), piece) {
                        col.append(piece);
                    }
                }
            }
        };
    loop {
        let pending = &buf[consumed..];
        // complete records in the buffer, cut into chunks
        let step = (pending.len() / (threads * 4)).max(chunking.min_chunk).max(1);
        let mut ends = record_ends(pending, step);
        if eof && ends.last() != Some(&pending.len()) && !pending.is_empty() {
            ends.push(pending.len());
        }
        let Some(&done) = ends.last() else {
            if eof {
                break;
            }
            // no record ends in the buffer yet: read on
            let had = buf.len();
            eof = read_more(&mut input, &mut buf, block, &mut hasher).map_err(io)?;
            stage.advance((buf.len() - had) as u64);
            continue;
        };
        let starts: Vec<usize> = std::iter::once(0).chain(ends.iter().copied()).take(ends.len()).collect();
        let parse = |i: usize| parse_chunk(&pending[starts[i]..ends[i]], width, &kinds);
        // parse these records while the previous ones are appended and the next block is read
        spare.clear();
        spare.resize(FRONT, 0);
        let previous = std::mem::take(&mut parsed);
        let (now, ((), read)) = rayon::join(
            || -> Vec<Result<ChunkOut, ShapeProblem>> {
                if ends.len() > 1 {
                    use rayon::prelude::*;
                    (0..ends.len()).into_par_iter().map(parse).collect()
                } else {
                    vec![parse(0)]
                }
            },
            || {
                merge(previous, &mut columns, &mut lines, &mut lines_before);
                let read = if eof { Ok(true) } else { read_more(&mut input, &mut spare, block, &mut hasher) };
                stage.advance((spare.len() - FRONT) as u64);
                ((), read)
            },
        );
        // a chunk that could not be read: the first problem of the file is in it
        if let Some(bad) = now.iter().position(Result::is_err) {
            let before: u64 = lines_before + now[..bad].iter().flatten().map(|p| p.line_ends).sum::<u64>();
            return Err(chunk_problem(path, &pending[starts[bad]..ends[bad]], before, &header));
        }
        parsed = now.into_iter().flatten().collect();
        eof = read.map_err(io)?;
        // the unfinished record goes in front of the next block
        let carry = &buf[consumed + done..];
        if carry.len() <= FRONT {
            let at = FRONT - carry.len();
            spare[at..FRONT].copy_from_slice(carry);
            std::mem::swap(&mut buf, &mut spare);
            consumed = at;
        } else {
            let mut joined = carry.to_vec();
            joined.extend_from_slice(&spare[FRONT..]);
            buf = joined;
            consumed = 0;
        }
        if eof && consumed >= buf.len() {
            break;
        }
    }
    merge(parsed, &mut columns, &mut lines, &mut lines_before);
    for c in columns.iter_mut().flatten() {
        c.seal();
    }
    let rows = lines.n;
    Ok(CsvColumns { header, columns, lines: lines.finish(), rows, sha256: hex(&hasher.finalize()) })
}

/// A hint when the bytes are plainly another format than CSV.
fn other_format(head: &[u8]) -> Option<&'static str> {
    if head.starts_with(b"PAR1") {
        Some("this is a Parquet file: give it the extension .parquet (or .pq) to read it as one")
    } else if head.starts_with(&[0x1f, 0x8b]) {
        Some("this is a gzip-compressed file: decompress it first (gzip -d)")
    } else if head.starts_with(b"PK\x03\x04") {
        Some("this is a zip archive (an Excel workbook?): export the sheet as CSV first")
    } else {
        None
    }
}

/// Append up to `want` bytes of `input` to `buf`, hashing them; `Ok(true)` at the end of input.
fn read_more(input: &mut impl Read, buf: &mut Vec<u8>, want: usize, hasher: &mut Sha256) -> std::io::Result<bool> {
    let start = buf.len();
    buf.resize(start + want, 0);
    let mut got = start;
    let mut eof = false;
    while got < buf.len() {
        match input.read(&mut buf[got..]) {
            Ok(0) => {
                eof = true;
                break;
            }
            Ok(k) => got += k,
            Err(e) if e.kind() == std::io::ErrorKind::Interrupted => {}
            Err(e) => {
                buf.truncate(start);
                return Err(e);
            }
        }
    }
    buf.truncate(got);
    hasher.update(&buf[start..got]);
    Ok(eof)
}

/// Lower-case hex of a digest.
pub(crate) fn hex(digest: &[u8]) -> String {
    let mut s = String::with_capacity(2 * digest.len());
    for b in digest {
        s.push_str(&format!("{b:02x}"));
    }
    s
}

/// One data row as text, with its line.
pub type TextRecord = (u64, Vec<String>);

/// The plain sequential reader: header and every data row as text, with its line. It is the
/// reference the fast reader is tested against.
///
/// # Errors
/// [`DataError::EmptyFile`], [`DataError::Malformed`] (not UTF-8, CSV syntax),
/// [`DataError::RaggedRow`].
pub fn sequential_records(path: &Path, bytes: &[u8]) -> DataResult<(Vec<String>, Vec<TextRecord>)> {
    let text_start = if bytes.starts_with(&[0xEF, 0xBB, 0xBF]) { 3 } else { 0 };
    let body = &bytes[text_start..];
    if body.iter().all(|b| b.is_ascii_whitespace()) {
        return Err(DataError::EmptyFile { path: path.to_path_buf() });
    }
    let mut rows = Vec::new();
    let header = scan_records(path, body, 0, None, &mut |line, record| {
        rows.push((line, record.iter().map(|s| s.to_string()).collect()));
    })?;
    let header = header.ok_or_else(|| DataError::EmptyFile { path: path.to_path_buf() })?;
    Ok((header, rows))
}

/// Read records one by one as the sequential reader does, handing each data row to `row`, and
/// stop at the first problem of shape. `lines_before` = line ends before `body` in the file;
/// `header` = the file's header when `body` starts after it (otherwise the first record that is
/// not blank is the header, and is returned).
fn scan_records(
    path: &Path,
    body: &[u8],
    lines_before: u64,
    mut header: Option<Vec<String>>,
    row: &mut dyn FnMut(u64, &csv::StringRecord),
) -> DataResult<Option<Vec<String>>> {
    let mut reader = csv::ReaderBuilder::new().has_headers(false).flexible(true).trim(csv::Trim::All).from_reader(body);
    let mut record = csv::StringRecord::new();
    let mut counter = LineCounter::new();
    loop {
        match reader.read_record(&mut record) {
            Ok(false) => break,
            Ok(true) => {}
            Err(e) => {
                let line =
                    lines_before + e.position().map(|p| counter.record_line(body, p.byte() as usize)).unwrap_or(0);
                return Err(match e.kind() {
                    csv::ErrorKind::Utf8 { err, .. } => {
                        // the column, when the header is known
                        let at = match header.as_ref().and_then(|h| h.get(err.field()).map(|n| (err.field(), n))) {
                            Some((c, name)) => Location::cell(path, line, c + 1, name),
                            None => Location::line(path, line),
                        };
                        DataError::Malformed { at, format: "CSV", message: "text is not valid UTF-8".into() }
                    }
                    _ => DataError::Malformed { at: Location::line(path, line), format: "CSV", message: e.to_string() },
                });
            }
        }
        let line = lines_before + record.position().map(|p| counter.record_line(body, p.byte() as usize)).unwrap_or(0);
        // Skip wholly blank lines.
        if record.len() == 1 && record[0].is_empty() {
            continue;
        }
        match &header {
            None => header = Some(record.iter().map(|s| s.to_string()).collect()),
            Some(h) => {
                if record.len() != h.len() {
                    return Err(DataError::RaggedRow {
                        at: Location::line(path, line),
                        expected: h.len(),
                        found: record.len(),
                    });
                }
                row(line, &record);
            }
        }
    }
    Ok(header)
}

/// The problem of shape in one chunk the fast reader refused: the chunk starts at a record
/// boundary and every record before it was read, so the first problem in the file is the
/// first one here.
fn chunk_problem(path: &Path, chunk: &[u8], lines_before: u64, header: &[String]) -> DataError {
    match scan_records(path, chunk, lines_before, Some(header.to_vec()), &mut |_, _| {}) {
        Err(e) => e,
        Ok(_) => DataError::Malformed {
            at: Location::line(path, lines_before + 1),
            format: "CSV",
            message: "the file changed while it was read".into(),
        },
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn record_ends_skip_line_ends_inside_quotes() {
        let text = b"a,\"x\ny\",1\nb,\"\"\"q\"\"\",2\nc,z,3\n";
        let ends = record_ends(text, 1);
        assert_eq!(ends, vec![10, 22, 28]);
        let plain = b"a,1\nb,2\nc,3";
        assert_eq!(record_ends(plain, 1), vec![4, 8]);
        assert_eq!(record_ends(plain, 100), vec![8]);
    }
}
