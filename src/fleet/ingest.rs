//! Reading fleet CSV files into [`FleetRow`]s, one record at a time.
//!
//! # Format
//! A header line, then one reading per record. Header names are matched
//! case-insensitively after trimming; columns this reader does not know are
//! ignored and listed once in [`IngestStats::unknown_columns`] and a notice.
//!
//! | column | required | meaning |
//! |---|---|---|
//! | `unit_id` | yes | the unit (cell, monobloc or battery) |
//! | `taken_at` | yes | RFC 3339 (`2024-03-01T08:30:00Z`, `…+02:00`), converted to UTC; or local `YYYY-MM-DD HH:MM`, `YYYY-MM-DDTHH:MM`, with `:SS` (and a fraction) allowed, kept as written |
//! | `volts` | one of `volts`/`sg` | rest voltage across the whole unit |
//! | `sg` | one of `volts`/`sg` | raw hydrometer reading(s): one per cell separated by `;`, or one mean value |
//! | `profile` | unless a default is given | profile id (matched in lower case) |
//! | `site`, `string` | no | where the unit is and which series string |
//! | `position` | no | whole number, place in the string |
//! | `cells` | no | cells in series in the unit, 1–400 |
//! | `temp_c` or `temp_f` | no (not both) | electrolyte or case temperature |
//! | `rest_h` | no | hours since the last charge or discharge (also `40m`, `1h30m`); empty = unknown |
//! | `after` | no | `charge`, `discharge`, `idle`, `float`; empty = unknown |
//! | `ohmic_mohm`, `baseline_mohm` | no | measured internal ohmic value and its baseline |
//! | `note` | no | free text |
//! | `float_current_a`, `ambient_c` | no | for float readings |
//! | `capacity_ah` | no | rated capacity of the unit (and so of its string), 0.5–20000 Ah; gives a float string its expected float current |
//!
//! The delimiter (comma, semicolon or tab) is detected from the header line
//! unless given. A UTF-8 byte-order mark and CRLF line ends are accepted. A
//! decimal comma (`12,41`) is read in semicolon- and tab-delimited files (and in
//! a quoted field of a comma-delimited one). In a semicolon-delimited file a
//! per-cell SG list separated by `;` must be quoted: `"1,265;1,270;1,262"`.
//!
//! Mixing the two timestamp kinds in one file mixes UTC and local clock time:
//! the reader does not know the site's time zone, so it cannot reconcile them.
//!
//! # Errors and rejects
//! A problem with the whole file (encoding, header, I/O) is an [`IngestError`]
//! with the file name and line. A problem with one record is a [`Rejected`]
//! naming the file, the line and the column, and reading goes on. Every record
//! read is either accepted or rejected: `rows_read = rows_accepted +
//! rows_rejected`. Records whose fields are all empty (spreadsheets export them)
//! are skipped and counted in a notice, not read.
//!
//! Text that is not UTF-8 (UTF-16 from some spreadsheet exports, or Latin-1 /
//! Windows-1252) is refused rather than guessed: the file must be re-saved as
//! UTF-8. Rows before the first undecodable line have already been delivered.
//!
//! # Memory
//! One read buffer and one record buffer are reused for every record; memory
//! does not grow with the number of records. The buffers grow to the longest
//! record seen, and a physical line longer than [`MAX_LINE_BYTES`] stops the
//! file with an error, so a file without line breaks cannot exhaust memory. Names that repeat
//! (unit, profile, site, string) are shared through small per-file caches, which
//! is why those fields are `Arc<str>`.

use crate::correct::rest::After;
use crate::units::{
    parse_decimal, parse_duration, Amperes, Celsius, Hours, Milliohms, Shown, SpecificGravity,
    Volts,
};
use chrono::{NaiveDate, NaiveDateTime, NaiveTime};
use serde::{Serialize, Serializer};
use std::collections::HashSet;
use std::fmt::{self, Write as _};
use std::io::{self, Read};
use std::sync::Arc;

pub mod parallel;
pub use parallel::{ingest_parallel, Parallelism};

/// Longest field accepted, in bytes; a longer field rejects its record.
pub const MAX_FIELD_BYTES: usize = 64 * 1024;
/// Longest physical line, in bytes; a longer one stops the file (no way to resynchronise).
pub const MAX_LINE_BYTES: u64 = 16 * 1024 * 1024;
/// Rest times above this (10 years) are taken as typing errors.
pub const MAX_REST_HOURS: f64 = 10.0 * 365.25 * 24.0;
/// Unit voltages beyond ±this are not a lead-acid unit or string.
pub const MAX_ABS_VOLTS: f64 = 1000.0;
/// Plausible electrolyte/ambient temperature range, °C: the range the
/// electrolyte model accepts (as `check --temp`), so that a °F value in a °C
/// column such as 77 is named, not read as 77 °C.
pub const TEMPERATURE_RANGE_C: (f64, f64) = (
    crate::electrolyte::TEMPERATURE_MIN_C,
    crate::electrolyte::TEMPERATURE_MAX_C,
);
/// Plausible raw specific gravity range of sulfuric-acid electrolyte.
pub const SG_RANGE: (f64, f64) = (1.0, 1.4);

/// Entries a name cache holds before it is emptied, so that a column of
/// all-distinct values (one reading per unit) cannot grow it without bound.
const INTERN_CAP: usize = 1 << 16;

/// Where a record came from.
#[derive(Clone, Debug, PartialEq, Eq, Hash)]
pub struct SourceRef {
    /// The input's name as given by the caller (a path, or `-` for stdin).
    pub file: Arc<str>,
    /// 1-based physical line on which the record starts.
    pub line: u64,
}

impl fmt::Display for SourceRef {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}:{}", self.file, self.line)
    }
}

impl Serialize for SourceRef {
    fn serialize<S: Serializer>(&self, s: S) -> Result<S::Ok, S::Error> {
        s.collect_str(self)
    }
}

fn ser_arc<S: Serializer>(v: &Arc<str>, s: S) -> Result<S::Ok, S::Error> {
    s.serialize_str(v)
}

fn ser_opt_arc<S: Serializer>(v: &Option<Arc<str>>, s: S) -> Result<S::Ok, S::Error> {
    match v {
        Some(v) => s.serialize_some(&**v),
        None => s.serialize_none(),
    }
}

/// One accepted reading. Values are as read: no temperature correction, no
/// plausibility judgement beyond the format checks listed in the module doc.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct FleetRow {
    /// File and line of the record.
    pub source: SourceRef,
    /// The unit's id (shared between readings of the same unit).
    #[serde(serialize_with = "ser_arc")]
    pub unit_id: Arc<str>,
    /// When the reading was taken: UTC for RFC 3339 input, local clock time for
    /// the `YYYY-MM-DD HH:MM` forms (see the module doc).
    pub taken_at: NaiveDateTime,
    /// The profile id: the record's value, or the caller's default.
    #[serde(serialize_with = "ser_arc")]
    pub profile: Arc<str>,
    /// Rest voltage across the unit. Zero and negative values are kept: they
    /// are evidence of a bad connection, which the analysis diagnoses.
    pub volts: Option<Volts>,
    /// Raw hydrometer readings (not temperature-corrected): one per cell, or one mean.
    pub sg: Vec<SpecificGravity>,
    /// Site name.
    #[serde(serialize_with = "ser_opt_arc")]
    pub site: Option<Arc<str>>,
    /// Series string name.
    #[serde(serialize_with = "ser_opt_arc")]
    pub string: Option<Arc<str>>,
    /// Position in the string.
    pub position: Option<u32>,
    /// Cells in series, when the record gives it.
    pub cells: Option<u32>,
    /// Temperature (from `temp_c`, or `temp_f` converted).
    pub temperature: Option<Celsius>,
    /// Time since the last charge or discharge; `None` when unknown.
    pub rest: Option<Hours>,
    /// What happened before the reading.
    pub after: After,
    /// Measured ohmic value.
    pub ohmic: Option<Milliohms>,
    /// Baseline ohmic value of the same unit.
    pub baseline_ohmic: Option<Milliohms>,
    /// Free text.
    pub note: Option<String>,
    /// Float current, for float readings.
    pub float_current: Option<Amperes>,
    /// Ambient temperature, for float readings.
    pub ambient: Option<Celsius>,
    /// Rated capacity of the unit (the string's, for units in series).
    pub capacity: Option<crate::units::AmpHours>,
}

/// A record that was not accepted, and why.
#[derive(Clone, Debug, PartialEq, Eq, Serialize)]
pub struct Rejected {
    /// The input's name.
    pub file: String,
    /// 1-based physical line on which the record starts.
    pub line: u64,
    /// What was wrong, naming the column(s) and what was expected.
    pub reason: String,
}

impl fmt::Display for Rejected {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "{}:{}: {}", self.file, self.line, self.reason)
    }
}

/// How to read.
#[derive(Clone, Debug, Default)]
pub struct IngestOptions {
    /// Profile id for records without one (and for files without a `profile` column).
    pub default_profile: Option<String>,
    /// Field delimiter; detected from the header line when `None`.
    pub delimiter: Option<u8>,
    /// When given, a record naming another profile is rejected with the nearest known id.
    pub known_profiles: Option<Vec<String>>,
    /// When given, a record taken after this instant is rejected. Compare like with
    /// like: RFC 3339 times become UTC, local times stay local.
    pub now: Option<NaiveDateTime>,
}

/// What a run read.
#[derive(Clone, Debug, Default, PartialEq, Serialize)]
pub struct IngestStats {
    /// Records read (blank records excluded).
    pub rows_read: u64,
    /// Records passed to the sink.
    pub rows_accepted: u64,
    /// Records passed to the reject callback.
    pub rows_rejected: u64,
    /// Header names that were ignored, as written.
    pub unknown_columns: Vec<String>,
    /// Things the user should know that are not errors.
    pub notices: Vec<String>,
}

impl IngestStats {
    /// Add another file's counts and notices to these.
    pub fn merge(&mut self, other: IngestStats) {
        self.rows_read += other.rows_read;
        self.rows_accepted += other.rows_accepted;
        self.rows_rejected += other.rows_rejected;
        for c in other.unknown_columns {
            if !self.unknown_columns.contains(&c) {
                self.unknown_columns.push(c);
            }
        }
        self.notices.extend(other.notices);
    }
}

/// A whole-file problem: nothing more can be read from this input.
#[derive(Debug, thiserror::Error)]
pub enum IngestError {
    /// The input could not be read.
    #[error("{file}:{line}: read error: {source}")]
    Io {
        /// Input name.
        file: String,
        /// Line reached.
        line: u64,
        /// The system's error.
        source: io::Error,
    },
    /// The text is not UTF-8.
    #[error("{file}:{line}: {what}; re-save the file as UTF-8 (in a spreadsheet: CSV UTF-8) and read it again")]
    Encoding {
        /// Input name.
        file: String,
        /// Line of the first undecodable byte.
        line: u64,
        /// What was found.
        what: String,
    },
    /// No bytes at all, or only blank lines.
    #[error(
        "{file}: the file is empty: expected a header line such as unit_id,taken_at,volts,profile"
    )]
    Empty {
        /// Input name.
        file: String,
    },
    /// The first line is data, not column names.
    #[error("{file}:{line}: the first line is not a header (found '{found}'): expected column names such as unit_id,taken_at,volts,profile")]
    NoHeader {
        /// Input name.
        file: String,
        /// Line of the first record.
        line: u64,
        /// The start of that line.
        found: String,
    },
    /// A required column is absent.
    #[error("{file}:{line}: missing required column `{column}`{hint}")]
    MissingColumn {
        /// Input name.
        file: String,
        /// Header line.
        line: u64,
        /// The column (or alternatives) required.
        column: String,
        /// A suggestion, starting with a separator, or empty.
        hint: String,
    },
    /// Two header names are the same after trimming and case folding.
    #[error("{file}:{line}: column `{column}` appears twice in the header (fields {first} and {second})")]
    DuplicateColumn {
        /// Input name.
        file: String,
        /// Header line.
        line: u64,
        /// The name, normalised.
        column: String,
        /// 1-based field number of the first.
        first: usize,
        /// 1-based field number of the second.
        second: usize,
    },
    /// Two columns that exclude each other are both present.
    #[error("{file}:{line}: columns `{a}` and `{b}` are both present: give the temperature in one unit only")]
    ConflictingColumns {
        /// Input name.
        file: String,
        /// Header line.
        line: u64,
        /// One column.
        a: String,
        /// The other.
        b: String,
    },
    /// A physical line is longer than [`MAX_LINE_BYTES`].
    #[error("{file}:{line}: a line is longer than {limit} bytes: this is not a readings file (or its line ends are missing)")]
    LineTooLong {
        /// Input name.
        file: String,
        /// Line on which the long record starts.
        line: u64,
        /// The limit in bytes.
        limit: u64,
    },
    /// The CSV parser gave up.
    #[error("{file}:{line}: {message}")]
    Csv {
        /// Input name.
        file: String,
        /// Line reached.
        line: u64,
        /// The parser's message.
        message: String,
    },
}

/// Open a named input: `-` is standard input, anything else a file path.
pub fn open_input(name: &str) -> Result<Box<dyn Read>, IngestError> {
    if name == "-" {
        return Ok(Box::new(io::stdin().lock()));
    }
    std::fs::File::open(name)
        .map(|f| Box::new(f) as Box<dyn Read>)
        .map_err(|source| IngestError::Io {
            file: name.to_string(),
            line: 0,
            source,
        })
}

#[derive(Clone, Copy, Debug, PartialEq, Eq)]
enum Col {
    UnitId,
    TakenAt,
    Profile,
    Volts,
    Sg,
    Site,
    String,
    Position,
    Cells,
    TempC,
    TempF,
    RestH,
    After,
    Ohmic,
    Baseline,
    Note,
    FloatCurrent,
    Ambient,
    Capacity,
}

const COLUMNS: [(Col, &str); 19] = [
    (Col::UnitId, "unit_id"),
    (Col::TakenAt, "taken_at"),
    (Col::Profile, "profile"),
    (Col::Volts, "volts"),
    (Col::Sg, "sg"),
    (Col::Site, "site"),
    (Col::String, "string"),
    (Col::Position, "position"),
    (Col::Cells, "cells"),
    (Col::TempC, "temp_c"),
    (Col::TempF, "temp_f"),
    (Col::RestH, "rest_h"),
    (Col::After, "after"),
    (Col::Ohmic, "ohmic_mohm"),
    (Col::Baseline, "baseline_mohm"),
    (Col::Note, "note"),
    (Col::FloatCurrent, "float_current_a"),
    (Col::Ambient, "ambient_c"),
    (Col::Capacity, "capacity_ah"),
];

fn col_name(c: Col) -> &'static str {
    COLUMNS[c as usize].1
}

/// Bytes asked of the input at a time (the buffer the csv crate's reader had).
const READ_BYTES: usize = 64 * 1024;

/// Quoting state of the CSV parser at a byte, as far as record ends go (the
/// csv crate's rules: a quote opens a quoted field only at the start of a
/// field, `""` inside one is a quote).
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
enum Quoting {
    /// At the start of a field.
    FieldStart,
    /// In an unquoted field (a quote here is a plain character).
    Unquoted,
    /// In a quoted field.
    Quoted,
    /// Just after a quote inside a quoted field: `"` again is an escaped quote.
    QuoteInQuoted,
}

impl Quoting {
    /// The state after byte `b`.
    fn step(self, b: u8, delimiter: u8) -> Quoting {
        match self {
            Quoting::Quoted if b == b'"' => Quoting::QuoteInQuoted,
            Quoting::Quoted => Quoting::Quoted,
            Quoting::QuoteInQuoted if b == b'"' => Quoting::Quoted,
            Quoting::FieldStart if b == b'"' => Quoting::Quoted,
            _ if matches!(b, b'\n' | b'\r') || b == delimiter => Quoting::FieldStart,
            _ => Quoting::Unquoted,
        }
    }
}

/// Why reading stopped, and on which line of the reader's input.
#[derive(Debug)]
enum ReadError {
    /// The input failed.
    Io { line: u64, source: io::Error },
    /// A physical line is longer than [`MAX_LINE_BYTES`].
    TooLong { line: u64 },
}

/// A whole-input error from the record reader, for input `name` whose line 1
/// is the reader's line `line_offset + 1`.
fn read_error(name: &str, e: ReadError, line_offset: u64) -> IngestError {
    match e {
        ReadError::TooLong { line } => IngestError::LineTooLong {
            file: name.to_string(),
            line: line + line_offset,
            limit: MAX_LINE_BYTES,
        },
        ReadError::Io { line, source } => IngestError::Io {
            file: name.to_string(),
            line: line + line_offset,
            source,
        },
    }
}

/// Where the current record's bytes are.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
enum Held {
    /// No record.
    None,
    /// In the read buffer as read, `start..end`, fields separated by the delimiter.
    InPlace { start: usize, end: usize },
    /// In `fields`, end to end, `..len`.
    Joined { len: usize },
}

/// Reads CSV records with the csv crate's rules (its parser, csv_core, with
/// the csv reader's defaults: `"` quotes, `""` escapes, `\r`, `\n` or `\r\n`
/// ends a record, empty lines are skipped, a UTF-8 byte-order mark at the
/// very start is dropped).
///
/// A record on one line without a quote, which is nearly every record of a
/// readings file, is split at its delimiters where it lies in the read
/// buffer: no copy, no per-byte state machine. Any other record (a quote
/// anywhere in its line) is handed to csv_core from the same buffer, so
/// quoting is exactly the csv crate's. The input is read in the same
/// 64 KiB requests, at the same points, as the csv crate's reader made.
///
/// It fails a physical line longer than [`MAX_LINE_BYTES`], so that a record
/// cannot grow without bound, and it counts line ends, so that each record's
/// line is the line on which it starts.
struct RecordReader<R> {
    inner: R,
    core: csv_core::Reader,
    delimiter: u8,
    /// Whether a record can be split in place: only with an ASCII delimiter
    /// that is not a quote or line end, so that splitting a line at it is
    /// what csv_core does, and valid UTF-8 in the line is valid UTF-8 in the
    /// fields.
    in_place: bool,
    buf: Vec<u8>,
    /// Whether `buf` holds the whole input from the start (a chunk in
    /// memory, [`RecordReader::over`]): reading then moves `filled` on
    /// through it, in the same steps, without copying.
    whole: bool,
    /// The unread bytes are `buf[pos..filled]`.
    pos: usize,
    filled: usize,
    /// `buf[pos..scanned]` holds no line end and no quote (a long line is
    /// not searched again after each read).
    scanned: usize,
    /// The input has ended (a read gave 0 bytes).
    eof: bool,
    /// No more records.
    done: bool,
    /// Whether the input has been read from at all.
    started: bool,
    /// `\n` bytes before `pos` (with those in `buf[pos..filled]`, every one
    /// read from the input).
    lines_before: u64,
    /// Bytes read since the last line end (`\n` or `\r`).
    run: u64,
    /// The current record when csv_core read it: its fields end to end, and
    /// where each ends.
    fields: Vec<u8>,
    ends: Vec<usize>,
    /// Where each field of the current record is in its bytes.
    bounds: Vec<(usize, usize)>,
    held: Held,
}

/// One record as read, borrowed from its [`RecordReader`].
#[derive(Clone, Copy)]
struct Record<'a> {
    /// The line as read (fields separated by `delimiter`) or the fields end to end.
    bytes: &'a [u8],
    /// Where each field is in `bytes`.
    bounds: &'a [(usize, usize)],
    /// The delimiter when `bytes` is the line as read.
    delimiter: Option<u8>,
}

impl<'a> Record<'a> {
    /// The number of fields.
    fn len(&self) -> usize {
        self.bounds.len()
    }

    /// The fields' bytes.
    fn iter(&self) -> impl Iterator<Item = &'a [u8]> + '_ {
        let bytes = self.bytes;
        self.bounds
            .iter()
            .map(move |&(a, b)| bytes.get(a..b).unwrap_or_default())
    }

    /// Whether every field is empty or ASCII white space (what spreadsheets
    /// export for an empty row).
    fn is_blank(&self) -> bool {
        // The delimiters between fields are not part of them.
        self.bytes
            .iter()
            .all(|&b| b.is_ascii_whitespace() || Some(b) == self.delimiter)
    }

    /// The record as a `csv::ByteRecord` (its fields end to end).
    fn to_byte_record(self) -> csv::ByteRecord {
        let mut rec = csv::ByteRecord::new();
        for f in self.iter() {
            rec.push_field(f);
        }
        rec
    }
}

/// The fields of `line` (no line end and no quote in it) split at
/// `delimiter`, into `bounds`.
fn split_line(line: &[u8], delimiter: u8, bounds: &mut Vec<(usize, usize)>) {
    // Eight bytes at a time, instead of a search call per field.
    const ONES: u64 = 0x0101_0101_0101_0101;
    const LOW7: u64 = 0x7F7F_7F7F_7F7F_7F7F;
    let delimiters = ONES * u64::from(delimiter);
    bounds.clear();
    let mut from = 0;
    let mut words = line.chunks_exact(8);
    let mut base = 0;
    for word in &mut words {
        let w = u64::from_le_bytes(word.try_into().unwrap_or([0; 8])) ^ delimiters;
        // The top bit of every byte of `w` that is zero (a delimiter), and of
        // no other: the exact form, without carries between bytes.
        let mut hits = !(((w & LOW7).wrapping_add(LOW7)) | w | LOW7);
        while hits != 0 {
            // Little-endian: the lowest set byte is the earliest.
            let i = base + (hits.trailing_zeros() / 8) as usize;
            bounds.push((from, i));
            from = i + 1;
            hits &= hits - 1;
        }
        base += 8;
    }
    for (k, &b) in words.remainder().iter().enumerate() {
        if b == delimiter {
            bounds.push((from, base + k));
            from = base + k + 1;
        }
    }
    bounds.push((from, line.len()));
}

/// A CSV parser for `delimiter`, ready to start on any part of an input.
/// Building one works out its state table (csv_core's `build`: about as much
/// work as parsing 600 rows), so a reader of many chunks reuses one through
/// [`primed`] (csv_core 0.1's `Clone` copies only part of the table, so a
/// clone is not a working parser).
fn primed_core(delimiter: u8) -> csv_core::Reader {
    primed(csv_core::ReaderBuilder::new().delimiter(delimiter).build())
}

/// `core` reset to read a new input from its start, as [`primed_core`] makes it.
fn primed(mut core: csv_core::Reader) -> csv_core::Reader {
    core.reset();
    // csv_core drops a byte-order mark at the start of the first input it
    // is given, which here need not be the start of the input; this
    // reader drops it itself. A line end is what a record start skips
    // anyway, so it leaves the parser as it was, but no longer "unread".
    let _ = core.read_record(b"\n", &mut [0], &mut [0]);
    core
}

impl RecordReader<io::Empty> {
    /// A reader of `bytes`, the whole input, read where it lies (records are
    /// found, lines counted and overlong lines failed at the same points as
    /// [`RecordReader::new`] over the same bytes). [`RecordReader::into_parts`]
    /// gives the bytes back.
    fn over(bytes: Vec<u8>, delimiter: u8, core: csv_core::Reader) -> Self {
        RecordReader {
            buf: bytes,
            whole: true,
            ..RecordReader::with_core(io::empty(), delimiter, core)
        }
    }
}

impl<R: Read> RecordReader<R> {
    fn new(inner: R, delimiter: u8) -> Self {
        RecordReader::with_core(inner, delimiter, primed_core(delimiter))
    }

    /// [`RecordReader::new`] with a parser from [`primed_core`] or [`primed`]
    /// for the same delimiter.
    fn with_core(inner: R, delimiter: u8, core: csv_core::Reader) -> Self {
        RecordReader {
            inner,
            core,
            delimiter,
            in_place: delimiter.is_ascii() && !matches!(delimiter, b'"' | b'\n' | b'\r'),
            buf: Vec::new(),
            whole: false,
            pos: 0,
            filled: 0,
            scanned: 0,
            eof: false,
            done: false,
            started: false,
            lines_before: 0,
            run: 0,
            fields: Vec::new(),
            ends: Vec::new(),
            bounds: Vec::new(),
            held: Held::None,
        }
    }

    /// The CSV parser, for [`primed`] to make ready for another input, and
    /// the buffer (for [`RecordReader::over`], the input it was given).
    fn into_parts(self) -> (csv_core::Reader, Vec<u8>) {
        (self.core, self.buf)
    }

    /// The line after the last line end read (where an overlong line starts,
    /// or where the input failed).
    fn current_line(&self) -> u64 {
        // Counted here, not as each block is read: only an error asks.
        let unread = memchr::memchr_iter(b'\n', &self.buf[self.pos..self.filled]).count();
        1 + self.lines_before + unread as u64
    }

    /// Read up to [`READ_BYTES`] more after the unread bytes, which move to
    /// the front of the buffer first (with the whole input in the buffer,
    /// take up to that many more of it).
    fn fill(&mut self) -> Result<(), ReadError> {
        if self.whole {
            let n = (self.buf.len() - self.filled).min(READ_BYTES);
            return self.took(n);
        }
        if self.pos > 0 {
            self.buf.copy_within(self.pos..self.filled, 0);
            self.filled -= self.pos;
            self.scanned = self.scanned.max(self.pos) - self.pos;
            self.pos = 0;
        }
        let end = self.filled + READ_BYTES;
        if self.buf.len() < end {
            self.buf.resize(end, 0);
        }
        let n = match self.inner.read(&mut self.buf[self.filled..end]) {
            Ok(n) => n,
            Err(source) => {
                return Err(ReadError::Io {
                    line: self.current_line(),
                    source,
                })
            }
        };
        self.took(n)
    }

    /// Account for `n` bytes just read into `buf[filled..]`.
    fn took(&mut self, n: usize) -> Result<(), ReadError> {
        let chunk = &self.buf[self.filled..self.filled + n];
        self.eof = n == 0;
        match memchr::memrchr2(b'\n', b'\r', chunk) {
            Some(i) => self.run = (n - i - 1) as u64,
            None => self.run += n as u64,
        }
        self.filled += n;
        if self.run > MAX_LINE_BYTES {
            return Err(ReadError::TooLong {
                line: self.current_line(),
            });
        }
        if !self.started {
            self.started = true;
            // As csv_core does: a byte-order mark in the first bytes read.
            if self.buf[self.pos..self.filled].starts_with(b"\xEF\xBB\xBF") {
                self.pos += 3;
                self.scanned = self.pos;
                // csv_core takes nothing after it in that read for the end
                // of the input.
                self.done = self.pos == self.filled;
            }
        }
        Ok(())
    }

    /// Read the next record; `Ok(None)` at the end of the input. On success
    /// the record is [`RecordReader::record`], and the number is the line
    /// (1-based, of this reader's input) on which it starts.
    fn advance(&mut self) -> Result<Option<u64>, ReadError> {
        self.held = Held::None;
        if !self.started {
            self.fill()?;
        }
        if self.done {
            return Ok(None);
        }
        // Line ends before a record are skipped, as csv_core skips them.
        loop {
            while let Some(&b) = self.buf[..self.filled].get(self.pos) {
                if b == b'\n' {
                    self.lines_before += 1;
                } else if b != b'\r' {
                    break;
                }
                self.pos += 1;
            }
            if self.pos < self.filled {
                break;
            }
            if self.eof {
                self.done = true;
                return Ok(None);
            }
            self.fill()?;
        }
        self.scanned = self.scanned.max(self.pos);
        let line = 1 + self.lines_before;
        if self.in_place && self.split_in_place()? {
            return Ok(Some(line));
        }
        self.read_with_core()?;
        Ok(if self.done { None } else { Some(line) })
    }

    /// The record at `pos`, when its line has no quote: split at the
    /// delimiters where it is. `Ok(false)` leaves it to csv_core.
    fn split_in_place(&mut self) -> Result<bool, ReadError> {
        // The record ends at the first line end, or at the end of the input;
        // a quote before that leaves it to csv_core. One search finds both.
        let end = loop {
            let rest = &self.buf[self.scanned..self.filled];
            if let Some(i) = memchr::memchr3(b'\n', b'\r', b'"', rest) {
                if rest[i] == b'"' {
                    return Ok(false);
                }
                break self.scanned + i;
            }
            self.scanned = self.filled;
            if self.eof {
                break self.filled;
            }
            self.fill()?;
        };
        let start = self.pos;
        split_line(&self.buf[start..end], self.delimiter, &mut self.bounds);
        self.held = Held::InPlace { start, end };
        // The line end goes with the record; a `\n` after a `\r` is skipped
        // before the next one.
        if self.buf[..self.filled].get(end) == Some(&b'\n') {
            self.lines_before += 1;
        }
        self.pos = (end + 1).min(self.filled);
        self.scanned = self.pos;
        Ok(true)
    }

    /// The record at `pos` through csv_core, reading more as it asks, as the
    /// csv crate's reader does. Sets `done` when csv_core finds no record.
    fn read_with_core(&mut self) -> Result<(), ReadError> {
        use csv_core::ReadRecordResult as Res;
        let (mut len, mut nends) = (0, 0);
        loop {
            if self.pos == self.filled && !self.eof {
                self.fill()?;
            }
            if self.fields.len() <= len {
                self.fields.resize((2 * self.fields.len()).max(256), 0);
            }
            if self.ends.len() <= nends {
                self.ends.resize((2 * self.ends.len()).max(32), 0);
            }
            let input = &self.buf[self.pos..self.filled];
            let (res, nin, nout, nend) =
                self.core
                    .read_record(input, &mut self.fields[len..], &mut self.ends[nends..]);
            self.lines_before += memchr::memchr_iter(b'\n', &input[..nin]).count() as u64;
            self.pos += nin;
            len += nout;
            nends += nend;
            match res {
                Res::InputEmpty | Res::OutputFull | Res::OutputEndsFull => {}
                Res::Record => break,
                Res::End => {
                    self.done = true;
                    return Ok(());
                }
            }
        }
        self.scanned = self.pos;
        self.bounds.clear();
        let mut from = 0;
        for &e in &self.ends[..nends] {
            self.bounds.push((from, e));
            from = e;
        }
        self.held = Held::Joined { len };
        Ok(())
    }

    /// The record read by the last [`RecordReader::advance`].
    fn record(&self) -> Record<'_> {
        let (bytes, delimiter) = match self.held {
            Held::InPlace { start, end } => (&self.buf[start..end], Some(self.delimiter)),
            Held::Joined { len } => (&self.fields[..len], None),
            Held::None => (&[][..], None),
        };
        Record {
            bytes,
            bounds: &self.bounds,
            delimiter,
        }
    }

    /// Put a record split in place end to end, as csv_core gives it: a
    /// multibyte character cut by a delimiter makes the line invalid UTF-8
    /// while its fields end to end may be valid, and the checks are on the
    /// latter.
    fn join_fields(&mut self) {
        let Held::InPlace { start, end } = self.held else {
            return;
        };
        self.fields.clear();
        for b in self.bounds.iter_mut() {
            let from = self.fields.len();
            self.fields
                .extend_from_slice(&self.buf[start..end][b.0..b.1]);
            *b = (from, self.fields.len());
        }
        self.held = Held::Joined {
            len: self.fields.len(),
        };
    }
}

/// Shares repeated names. Emptied when full so its size stays bounded.
/// Names are lent (`&Arc<str>`), not handed out: a row slot that already
/// holds the same allocation ([`set_name`]) takes no count on it, and a
/// count is an atomic operation.
#[derive(Clone, Default)]
struct Interner {
    // ahash, keyed at random per process like std's SipHash (so a crafted
    // file cannot make lookups collide), at a fraction of its cost: every
    // record of a file sorted by time looks up a unit it did not just see.
    set: HashSet<Arc<str>, ahash::RandomState>,
    /// The last name given (empty before the first).
    last: Arc<str>,
}

impl Interner {
    fn get(&mut self, s: &str) -> &Arc<str> {
        if *self.last != *s {
            self.last = match self.set.get(s) {
                Some(a) => a.clone(),
                None => {
                    if self.set.len() >= INTERN_CAP {
                        self.set.clear();
                    }
                    let a: Arc<str> = Arc::from(s);
                    self.set.insert(a.clone());
                    a
                }
            };
        }
        &self.last
    }

    /// The last name again if it is `s`, else a new one, without the set:
    /// for unit ids. A file grouped by unit repeats the last id; a file
    /// sorted by time has nearly every unit in the set, and looking each row
    /// up in it (a cache miss on a table of 50,000 names, another on the
    /// name) cost more than a new name does (8 % of a time-sorted run).
    fn get_recent(&mut self, s: &str) -> &Arc<str> {
        if *self.last != *s {
            self.last = Arc::from(s);
        }
        &self.last
    }
}

/// Put `name` in `slot`, unless the slot holds it already (the same
/// allocation): a recycled row mostly does, and then no count changes.
fn set_name(slot: &mut Arc<str>, name: &Arc<str>) {
    if !Arc::ptr_eq(slot, name) {
        slot.clone_from(name);
    }
}

/// [`set_name`] for an optional name.
fn set_opt_name(slot: &mut Option<Arc<str>>, name: Option<&Arc<str>>) {
    match (slot.as_mut(), name) {
        (Some(s), Some(n)) => set_name(s, n),
        (None, None) => {}
        (_, n) => *slot = n.cloned(),
    }
}

/// Validate a record as UTF-8 (one pass over its bytes) and return its text,
/// every field end to end, so that the fields need no validation of their
/// own; on failure, say which field and which byte, with a guess at the
/// encoding.
fn check_utf8<'r>(
    bytes: &'r [u8],
    fields: impl Iterator<Item = &'r [u8]>,
    names: &[String],
) -> Result<&'r str, String> {
    if let Ok(text) = std::str::from_utf8(bytes) {
        return Ok(text);
    }
    for (i, f) in fields.enumerate() {
        if let Err(e) = std::str::from_utf8(f) {
            let at = e.valid_up_to();
            let byte = f.get(at).copied().unwrap_or(0);
            let place = match names.get(i) {
                Some(n) => format!("column `{n}`"),
                None => format!("field {}", i + 1),
            };
            let guess = if byte >= 0x80 {
                " (it looks like Latin-1 or Windows-1252, e.g. an accented letter or a degree sign)"
            } else {
                ""
            };
            return Err(format!(
                "the text is not valid UTF-8: byte 0x{byte:02X} in {place}{guess}"
            ));
        }
    }
    // Unreachable: the fields are the record's bytes, so one of them failed.
    Ok("")
}

/// Shorten a value for a message.
fn show(s: &str) -> String {
    const MAX: usize = 40;
    match s.char_indices().nth(MAX) {
        Some((i, _)) => format!("{}…", &s[..i]),
        None => s.to_string(),
    }
}

fn problem(problems: &mut String, col: Col, args: fmt::Arguments<'_>) {
    if !problems.is_empty() {
        problems.push_str("; ");
    }
    let _ = write!(problems, "column `{}`: {}", col_name(col), args);
}

/// The powers of ten that an `f64` holds exactly.
const EXACT_POWERS_OF_TEN: [f64; 23] = [
    1e0, 1e1, 1e2, 1e3, 1e4, 1e5, 1e6, 1e7, 1e8, 1e9, 1e10, 1e11, 1e12, 1e13, 1e14, 1e15, 1e16,
    1e17, 1e18, 1e19, 1e20, 1e21, 1e22,
];

/// The value of a plain decimal, `[+-]digits[.digits]`, when its digits
/// make an integer below 2^53 and it has at most 22 decimals; `None` for
/// anything else. Both the integer and the power of ten are then exact in an
/// `f64`, so one correctly rounded division gives the correctly rounded
/// value, which is what `str::parse` gives (Clinger's fast path), at a
/// fraction of the cost of the general algorithm.
#[inline]
fn plain_decimal(raw: &str) -> Option<f64> {
    let b = raw.as_bytes();
    let (negative, digits) = match b.first()? {
        b'-' => (true, &b[1..]),
        b'+' => (false, &b[1..]),
        _ => (false, b),
    };
    // Wrapping: past 19 digits the integer is wrong, but then it is not used.
    let mut mantissa = 0u64;
    let mut i = 0;
    let mut take_digits = |i: &mut usize| {
        while let Some(d) = digits
            .get(*i)
            .map(|c| c.wrapping_sub(b'0'))
            .filter(|d| *d <= 9)
        {
            mantissa = mantissa.wrapping_mul(10).wrapping_add(u64::from(d));
            *i += 1;
        }
    };
    take_digits(&mut i);
    let whole_digits = i;
    let mut decimals = 0;
    if digits.get(i) == Some(&b'.') {
        i += 1;
        take_digits(&mut i);
        decimals = i - whole_digits - 1;
    }
    // `5.`, `.5` and anything after the digits go the general way.
    if i != digits.len()
        || whole_digits == 0
        || (decimals == 0 && i > whole_digits)
        || whole_digits + decimals > 19
        || mantissa > 1 << 53
    {
        return None;
    }
    let v = mantissa as f64 / EXACT_POWERS_OF_TEN.get(decimals)?;
    Some(if negative { -v } else { v })
}

/// [`parse_decimal`] with allocation-free fast paths for plain numbers,
/// which are nearly all of them.
#[inline]
fn decimal(raw: &str, expected: &str) -> Result<f64, crate::units::UnitError> {
    match plain_decimal(raw) {
        Some(v) => Ok(v),
        None => general_decimal(raw, expected),
    }
}

/// [`decimal`] for what is not a plain decimal: kept out of line, so that
/// the fast path is small enough to inline.
#[cold]
#[inline(never)]
fn general_decimal(raw: &str, expected: &str) -> Result<f64, crate::units::UnitError> {
    if !raw.is_empty()
        && raw
            .bytes()
            .all(|b| b.is_ascii_digit() || matches!(b, b'.' | b'-' | b'+'))
    {
        if let Ok(v) = raw.parse::<f64>() {
            if v.is_finite() {
                return Ok(v);
            }
        }
    }
    parse_decimal(raw, expected)
}

/// Parse `YYYY-MM-DD[T ]HH:MM[:SS[.fff]][Z|±HH:MM|±HHMM]`. With an offset the
/// time is converted to UTC; without one it is returned as written.
pub fn parse_timestamp(text: &str) -> Option<NaiveDateTime> {
    let b = text.as_bytes();
    if b.len() < 16 {
        return None;
    }
    let num = |r: std::ops::Range<usize>| -> Option<u32> {
        let mut v = 0u32;
        for &c in b.get(r)? {
            if !c.is_ascii_digit() {
                return None;
            }
            v = v * 10 + u32::from(c - b'0');
        }
        Some(v)
    };
    if b[4] != b'-' || b[7] != b'-' || !matches!(b[10], b'T' | b't' | b' ') || b[13] != b':' {
        return None;
    }
    let date = NaiveDate::from_ymd_opt(num(0..4)? as i32, num(5..7)?, num(8..10)?)?;
    let (hour, minute) = (num(11..13)?, num(14..16)?);
    let mut i = 16;
    let mut second = 0;
    let mut nano = 0u32;
    if b.get(i) == Some(&b':') {
        second = num(i + 1..i + 3)?;
        i += 3;
        if b.get(i) == Some(&b'.') {
            i += 1;
            let start = i;
            let mut scale = 100_000_000u32;
            while let Some(c) = b.get(i).filter(|c| c.is_ascii_digit()) {
                nano += u32::from(c - b'0') * scale;
                scale /= 10;
                i += 1;
            }
            if i == start {
                return None;
            }
        }
    }
    let time = NaiveTime::from_hms_nano_opt(hour, minute, second, nano)?;
    let local = NaiveDateTime::new(date, time);
    let rest = &b[i..];
    let offset_minutes: i64 = match rest {
        [] => return Some(local),
        [b'Z' | b'z'] => 0,
        [sign @ (b'+' | b'-'), h1, h2, b':', m1, m2] | [sign @ (b'+' | b'-'), h1, h2, m1, m2] => {
            let digit = |c: u8| c.is_ascii_digit().then(|| i64::from(c - b'0'));
            let h = digit(*h1)? * 10 + digit(*h2)?;
            let m = digit(*m1)? * 10 + digit(*m2)?;
            if h > 23 || m > 59 {
                return None;
            }
            if *sign == b'-' {
                -(h * 60 + m)
            } else {
                h * 60 + m
            }
        }
        _ => return None,
    };
    local.checked_sub_signed(chrono::Duration::minutes(offset_minutes))
}

#[derive(Clone)]
struct RowParser<'o> {
    file: Arc<str>,
    idx: [Option<usize>; COLUMNS.len()],
    width: usize,
    names: Vec<String>,
    delimiter: u8,
    opts: &'o IngestOptions,
    default_profile: Option<Arc<str>>,
    known: Option<HashSet<String>>,
    /// The last profile found in `known`: the same name needs no lookup
    /// again.
    last_known: Option<String>,
    /// [`IngestOptions::now`] as a reject shows it, written once: a file
    /// dated past it rejects every row, and chrono's formatter was a tenth
    /// of reading such a file.
    now_text: String,
    /// Unit ids: only the last one is kept ([`Interner::get_recent`]).
    units: Interner,
    profiles: Interner,
    sites: Interner,
    strings: Interner,
}

/// A record's fields of the known columns, trimmed, indexed by [`Col`]
/// (empty for a column the file does not have).
type Fields<'r> = [&'r str; COLUMNS.len()];

/// Bytes that can neither be nor end white space at the end of a field:
/// ASCII other than the ASCII white space of `char::is_whitespace` (a
/// table, because the test runs on both ends of every field).
const PLAIN_END: [bool; 256] = {
    let mut t = [false; 256];
    let mut b = 0;
    while b < 128 {
        t[b] = !matches!(b as u8, b'\t'..=b'\r' | b' ');
        b += 1;
    }
    t
};

/// `str::trim`, without its decoding of characters when both ends are
/// ASCII and not white space, as they are in nearly every field.
fn trim(s: &str) -> &str {
    match (s.as_bytes().first(), s.as_bytes().last()) {
        (Some(&a), Some(&z)) if PLAIN_END[usize::from(a)] && PLAIN_END[usize::from(z)] => s,
        (None, _) => s,
        _ => s.trim(),
    }
}

/// Where [`RowParser::parse`] puts accepted rows: it fills the row that
/// `slot` lends (every field, so whatever the slot held before does not
/// matter), then calls `accept`. A slot that is filled and not accepted
/// holds a rejected record's partial row and is filled again by the next.
pub(crate) trait RowSink {
    /// The row the next record is parsed into.
    fn slot(&mut self) -> &mut FleetRow;
    /// The row in the slot was accepted.
    fn accept(&mut self);
}

/// Each accepted row, as a row of its own, to a closure.
struct EachRow<'a> {
    sink: &'a mut dyn FnMut(FleetRow),
    row: FleetRow,
}

impl RowSink for EachRow<'_> {
    fn slot(&mut self) -> &mut FleetRow {
        &mut self.row
    }
    fn accept(&mut self) {
        (self.sink)(self.row.clone());
    }
}

/// Rows kept from batch to batch and filled again: the names a slot
/// already holds (mostly the same file, profile, site and string) are not
/// counted again, and its hydrometer list and note are reused. Counting a
/// name is an atomic operation, and a row has five of them.
#[derive(Default)]
pub(crate) struct RowBatch {
    rows: Vec<FleetRow>,
    /// How many of `rows` hold this batch's accepted rows.
    len: usize,
}

impl RowBatch {
    /// This batch's rows, for folding: what they hold afterwards is only
    /// reused, never read.
    pub(crate) fn rows_mut(&mut self) -> &mut [FleetRow] {
        let len = self.len;
        &mut self.rows[..len]
    }

    /// Start the next batch, keeping the rows to fill again.
    pub(crate) fn reset(&mut self) {
        self.len = 0;
    }
}

impl RowSink for RowBatch {
    fn slot(&mut self) -> &mut FleetRow {
        if self.len == self.rows.len() {
            self.rows.push(FleetRow::blank());
        }
        &mut self.rows[self.len]
    }
    fn accept(&mut self) {
        self.len += 1;
    }
}

impl FleetRow {
    /// A row to parse into: every field empty or unknown.
    fn blank() -> FleetRow {
        FleetRow {
            source: SourceRef {
                file: Arc::from(""),
                line: 0,
            },
            unit_id: Arc::from(""),
            taken_at: NaiveDateTime::default(),
            profile: Arc::from(""),
            volts: None,
            sg: Vec::new(),
            site: None,
            string: None,
            position: None,
            cells: None,
            temperature: None,
            rest: None,
            after: After::Unknown,
            ohmic: None,
            baseline_ohmic: None,
            note: None,
            float_current: None,
            ambient: None,
            capacity: None,
        }
    }
}

impl RowParser<'_> {
    /// Give this parser a copy of the input's name of its own: every row
    /// holds a count on it, and on a name shared between reading threads
    /// each count was an atomic operation on a cache line the threads took
    /// from each other.
    fn own_file_name(&mut self) {
        self.file = Arc::from(&*self.file);
    }

    /// The known columns' fields of `rec`, whose whole text is `text`:
    /// sliced once, so the checks below neither re-validate nor re-trim.
    fn fields<'r>(&self, rec: &Record<'_>, text: &'r str) -> Fields<'r> {
        // Made from the column map in one pass: an array of empty fields
        // filled afterwards through the list of present columns took 158
        // more instructions a record (callgrind). The array is still copied
        // out once, by a call to `memcpy` (64 instructions a record).
        std::array::from_fn(|c| match self.idx[c].and_then(|i| rec.bounds.get(i)) {
            Some(&(a, b)) => text.get(a..b).map_or("", trim),
            None => "",
        })
    }

    /// Inlined for the empty field, which most of a record's optional
    /// columns are: a call for each was 1 % of the instructions.
    #[inline(always)]
    fn number(&self, f: &Fields<'_>, c: Col, expected: &str, problems: &mut String) -> Option<f64> {
        let raw = f[c as usize];
        if raw.is_empty() {
            return None;
        }
        Self::nonempty_number(raw, c, expected, problems)
    }

    #[inline(never)]
    fn nonempty_number(raw: &str, c: Col, expected: &str, problems: &mut String) -> Option<f64> {
        match decimal(raw, expected) {
            Ok(v) => Some(v),
            Err(e) => {
                problem(problems, c, format_args!("{e}"));
                None
            }
        }
    }

    fn celsius(&self, f: &Fields<'_>, c: Col, problems: &mut String) -> Option<Celsius> {
        let v = self.number(f, c, "degrees Celsius", problems)?;
        let (lo, hi) = TEMPERATURE_RANGE_C;
        if (lo..=hi).contains(&v) {
            return Some(Celsius(v));
        }
        let as_c = Celsius::from_fahrenheit(v).0;
        if (lo..=hi).contains(&as_c) {
            problem(
                problems,
                c,
                format_args!("{} is implausible for °C: was it °F? (expected {lo} to {hi} °C; use a temp_f column for °F)", Shown(v)),
            );
        } else {
            problem(
                problems,
                c,
                format_args!("{} °C is outside the plausible {lo} to {hi} °C", Shown(v)),
            );
        }
        None
    }

    fn whole(&self, f: &Fields<'_>, c: Col, problems: &mut String) -> Option<u32> {
        let raw = f[c as usize];
        if raw.is_empty() {
            return None;
        }
        match raw.parse::<u32>() {
            Ok(v) => Some(v),
            Err(_) => {
                problem(
                    problems,
                    c,
                    format_args!("'{}' is not a whole number ≥ 0", show(raw)),
                );
                None
            }
        }
    }

    fn ohms(&self, f: &Fields<'_>, c: Col, problems: &mut String) -> Option<Milliohms> {
        let v = self.number(f, c, "milliohms", problems)?;
        if v > 0.0 && v <= 100_000.0 {
            Some(Milliohms(v))
        } else {
            problem(
                problems,
                c,
                format_args!(
                    "{} mΩ is not a plausible ohmic value (expected above 0 and up to 100000 mΩ)",
                    Shown(v)
                ),
            );
            None
        }
    }

    /// Judge one record, whose whole text (validated) is `text`: fill the
    /// row in `out`'s slot and accept it and return `true`, or return
    /// `false` with the reasons in `problems`. (The row is filled where it
    /// lies, not returned, which saves copying it, some 300 bytes, on its
    /// way.)
    fn parse(
        &mut self,
        rec: &Record<'_>,
        text: &str,
        line: u64,
        problems: &mut String,
        out: &mut dyn RowSink,
    ) -> bool {
        problems.clear();
        if rec.len() != self.width {
            let name = |i: usize| self.names.get(i).map(String::as_str).unwrap_or("?");
            let _ = if rec.len() < self.width {
                write!(
                    problems,
                    "found {} fields where the header has {}: column `{}` and after are missing (truncated line?)",
                    rec.len(),
                    self.width,
                    name(rec.len())
                )
            } else {
                write!(
                    problems,
                    "found {} fields where the header has {}: extra fields after column `{}`",
                    rec.len(),
                    self.width,
                    name(self.width - 1)
                )
            };
            if self.delimiter == b';' && self.idx[Col::Sg as usize].is_some() {
                problems.push_str(
                    " (in a semicolon-delimited file an SG list separated by ';' must be quoted)",
                );
            }
            return false;
        }
        // No field can be over the limit when the whole record is not.
        if text.len() > MAX_FIELD_BYTES {
            for (i, f) in rec.iter().enumerate() {
                if f.len() > MAX_FIELD_BYTES {
                    let _ = write!(
                        problems,
                        "column `{}`: field is {} bytes, over the {} KiB limit for one field",
                        self.names.get(i).map(String::as_str).unwrap_or("?"),
                        f.len(),
                        MAX_FIELD_BYTES / 1024
                    );
                    return false;
                }
            }
        }
        let f = &self.fields(rec, text);

        let unit = f[Col::UnitId as usize];
        if unit.is_empty() {
            problem(
                problems,
                Col::UnitId,
                format_args!("empty: every reading needs its unit"),
            );
        }

        let raw_time = f[Col::TakenAt as usize];
        let taken_at = match parse_timestamp(raw_time) {
            Some(t) => {
                if self.opts.now.is_some_and(|now| t > now) {
                    problem(
                        problems,
                        Col::TakenAt,
                        format_args!(
                            "{t} is in the future: expected at most {}, as a reading cannot be taken later; check the year and the meter's clock",
                            self.now_text
                        ),
                    );
                }
                Some(t)
            }
            None => {
                problem(
                    problems,
                    Col::TakenAt,
                    format_args!(
                        "'{}' is not a timestamp (expected RFC 3339 like 2024-03-01T08:30:00Z, or local YYYY-MM-DD HH:MM[:SS])",
                        show(raw_time)
                    ),
                );
                None
            }
        };

        let raw_profile = f[Col::Profile as usize];
        let lower;
        let profile: Option<&str> = if raw_profile.is_empty() {
            if self.default_profile.is_none() {
                problem(
                    problems,
                    Col::Profile,
                    format_args!("empty and no default profile was given"),
                );
            }
            self.default_profile.as_deref()
        } else if raw_profile.bytes().any(|b| b.is_ascii_uppercase()) {
            lower = raw_profile.to_ascii_lowercase();
            Some(&lower)
        } else {
            Some(raw_profile)
        };
        let seen = matches!((profile, &self.last_known), (Some(p), Some(k)) if k == p);
        if let (Some(p), Some(known), false) = (profile, &self.known, seen) {
            if known.contains(p) {
                self.last_known = Some(p.to_string());
            } else {
                let near = known
                    .iter()
                    .map(|k| (strsim::damerau_levenshtein(p, k), k))
                    .filter(|(d, k)| *d <= 3.max(k.len() / 3))
                    .min();
                match near {
                    Some((_, k)) => problem(
                        problems,
                        Col::Profile,
                        format_args!("unknown profile '{}' (did you mean '{k}'?)", show(p)),
                    ),
                    None => problem(
                        problems,
                        Col::Profile,
                        format_args!("unknown profile '{}'", show(p)),
                    ),
                }
            }
        }

        let volts = self.number(f, Col::Volts, "volts", problems).and_then(|v| {
            if v.abs() <= MAX_ABS_VOLTS {
                Some(Volts(v))
            } else {
                problem(
                    problems,
                    Col::Volts,
                    format_args!(
                        "{} V is absurd for a lead-acid unit (expected at most {MAX_ABS_VOLTS} V)",
                        Shown(v)
                    ),
                );
                None
            }
        });

        let raw_sg = f[Col::Sg as usize];
        // Into the slot's own list, which a recycled slot has already.
        let row = out.slot();
        let sg = &mut row.sg;
        sg.clear();
        if !raw_sg.is_empty() {
            // Sized once: a summary may keep the row, so growth would cost
            // a reallocation.
            sg.reserve_exact(1 + memchr::memchr_iter(b';', raw_sg.as_bytes()).count());
            let (lo, hi) = SG_RANGE;
            for (k, part) in raw_sg.split(';').enumerate() {
                let part = trim(part);
                match decimal(part, "a specific gravity like 1.265") {
                    Ok(v) if (lo..=hi).contains(&v) => sg.push(SpecificGravity(v)),
                    Ok(v) if (lo * 1000.0..=hi * 1000.0).contains(&v) => problem(
                        problems,
                        Col::Sg,
                        format_args!("value {} is {}: write specific gravity as a ratio ({:.3}), not in points", k + 1, Shown(v), v / 1000.0),
                    ),
                    Ok(v) => problem(
                        problems,
                        Col::Sg,
                        format_args!("value {} is {}, outside the {lo:.3}–{hi:.3} of sulfuric-acid electrolyte", k + 1, Shown(v)),
                    ),
                    Err(e) => problem(problems, Col::Sg, format_args!("value {}: {e}", k + 1)),
                }
            }
        }
        if volts.is_none() && raw_sg.is_empty() && f[Col::Volts as usize].is_empty() {
            problem(
                problems,
                Col::Volts,
                format_args!(
                    "empty, and `sg` is empty too: a reading needs a voltage or a hydrometer value"
                ),
            );
        }

        let cells = self.whole(f, Col::Cells, problems).and_then(|n| {
            if (1..=400).contains(&n) {
                Some(n)
            } else {
                problem(
                    problems,
                    Col::Cells,
                    format_args!("{n} cells: expected 1–400"),
                );
                None
            }
        });
        if let Some(n) = cells {
            if sg.len() > 1 && sg.len() != n as usize {
                problem(
                    problems,
                    Col::Sg,
                    format_args!(
                        "{} values for {n} cells: give one per cell, or one mean value",
                        sg.len()
                    ),
                );
            }
        }

        let position = self.whole(f, Col::Position, problems);
        let temperature = if self.idx[Col::TempF as usize].is_some() {
            self.number(f, Col::TempF, "degrees Fahrenheit", problems)
                .and_then(|f| {
                    let c = Celsius::from_fahrenheit(f);
                    let (lo, hi) = TEMPERATURE_RANGE_C;
                    if (lo..=hi).contains(&c.0) {
                        Some(c)
                    } else {
                        problem(
                            problems,
                            Col::TempF,
                            format_args!(
                                "{f} °F is outside the plausible {:.0} to {:.0} °F",
                                Celsius(lo).to_fahrenheit(),
                                Celsius(hi).to_fahrenheit()
                            ),
                        );
                        None
                    }
                })
        } else {
            self.celsius(f, Col::TempC, problems)
        };
        let ambient = self.celsius(f, Col::Ambient, problems);

        let raw_rest = f[Col::RestH as usize];
        let rest = if raw_rest.is_empty() {
            None
        } else {
            let hours = decimal(raw_rest, "hours")
                .map(|h| Some(Hours(h)))
                .or_else(|_| parse_duration(raw_rest).map_err(|e| e.to_string()));
            match hours {
                Ok(Some(h)) if h.0 < 0.0 => {
                    problem(problems, Col::RestH, format_args!("{} h is negative: rest counts from the end of the last charge or discharge", h.0));
                    None
                }
                Ok(Some(h)) if h.0 > MAX_REST_HOURS => {
                    problem(
                        problems,
                        Col::RestH,
                        format_args!("{} h is more than 10 years", h.0),
                    );
                    None
                }
                Ok(h) => h,
                Err(_) => {
                    problem(
                        problems,
                        Col::RestH,
                        format_args!("'{}' is not a rest time (expected hours like 6 or 1.5, or 40m, 1h30m; empty if unknown)", show(raw_rest)),
                    );
                    None
                }
            }
        };

        let raw_after = f[Col::After as usize];
        let after = [
            ("charge", After::Charge),
            ("discharge", After::Discharge),
            ("idle", After::Idle),
            ("float", After::Float),
            ("unknown", After::Unknown),
            ("", After::Unknown),
        ]
        .iter()
        .find(|(w, _)| raw_after.eq_ignore_ascii_case(w))
        .map(|(_, a)| *a)
        .unwrap_or_else(|| {
            problem(
                problems,
                Col::After,
                format_args!(
                    "'{}' is not one of charge, discharge, idle, float (empty = unknown)",
                    show(raw_after)
                ),
            );
            After::Unknown
        });

        let ohmic = self.ohms(f, Col::Ohmic, problems);
        let baseline_ohmic = self.ohms(f, Col::Baseline, problems);
        let float_current = self
            .number(f, Col::FloatCurrent, "amperes", problems)
            .and_then(|a| {
                if a.abs() <= 10_000.0 {
                    Some(Amperes(a))
                } else {
                    problem(
                        problems,
                        Col::FloatCurrent,
                        format_args!("{} A is absurd for a float current", Shown(a)),
                    );
                    None
                }
            });
        // Common practice: lead-acid units run from under 1 Ah (small sealed
        // blocks) to a few thousand Ah (large stationary cells); outside
        // this, the value is a typing error or in the wrong unit (mAh).
        const CAPACITY_AH: (f64, f64) = (0.5, 20_000.0);
        let capacity = self
            .number(f, Col::Capacity, "ampere-hours", problems)
            .and_then(|c| {
                let (lo, hi) = CAPACITY_AH;
                if (lo..=hi).contains(&c) {
                    Some(crate::units::AmpHours(c))
                } else {
                    problem(
                        problems,
                        Col::Capacity,
                        format_args!("{} Ah is not a plausible rated capacity (expected {lo} to {hi} Ah, the unit's C-rate capacity in Ah, not mAh)", Shown(c)),
                    );
                    None
                }
            });

        if !problems.is_empty() {
            return false;
        }
        let (Some(taken_at), Some(profile)) = (taken_at, profile) else {
            return false;
        };
        let (raw_site, raw_string) = (f[Col::Site as usize], f[Col::String as usize]);
        let note = f[Col::Note as usize];
        set_name(&mut row.source.file, &self.file);
        row.source.line = line;
        set_name(&mut row.unit_id, self.units.get_recent(unit));
        row.taken_at = taken_at;
        match &self.default_profile {
            Some(d) if raw_profile.is_empty() => set_name(&mut row.profile, d),
            _ => set_name(&mut row.profile, self.profiles.get(profile)),
        }
        row.volts = volts;
        fn opt_name<'i>(i: &'i mut Interner, s: &str) -> Option<&'i Arc<str>> {
            (!s.is_empty()).then(|| i.get(s))
        }
        set_opt_name(&mut row.site, opt_name(&mut self.sites, raw_site));
        set_opt_name(&mut row.string, opt_name(&mut self.strings, raw_string));
        row.position = position;
        row.cells = cells;
        row.temperature = temperature;
        row.rest = rest;
        row.after = after;
        row.ohmic = ohmic;
        row.baseline_ohmic = baseline_ohmic;
        match (&mut row.note, note) {
            (_, "") => row.note = None,
            (Some(kept), _) => {
                kept.clear();
                kept.push_str(note);
            }
            (None, _) => row.note = Some(note.to_string()),
        }
        row.float_current = float_current;
        row.ambient = ambient;
        row.capacity = capacity;
        out.accept();
        true
    }
}

/// The start of an input as read before any record: the bytes up to and
/// including the first line end (or the first 64 KiB), with the encoding
/// checked and the delimiter known.
struct Prefix {
    bytes: Vec<u8>,
    /// Bytes of a UTF-8 byte-order mark at the start (0 or 3).
    bom: usize,
    delimiter: u8,
}

fn read_prefix<R: Read>(
    name: &str,
    reader: &mut R,
    opts: &IngestOptions,
) -> Result<Prefix, IngestError> {
    // Read up to the first line end so the encoding and delimiter can be
    // judged before the CSV reader sees anything.
    let mut prefix = Vec::with_capacity(8192);
    let mut chunk = [0u8; 8192];
    loop {
        let n = match reader.read(&mut chunk) {
            Ok(n) => n,
            Err(e) if e.kind() == io::ErrorKind::Interrupted => continue,
            Err(source) => {
                return Err(IngestError::Io {
                    file: name.to_string(),
                    line: 1,
                    source,
                })
            }
        };
        if n == 0 {
            break;
        }
        let had_line_end = chunk[..n].contains(&b'\n');
        prefix.extend_from_slice(&chunk[..n]);
        if had_line_end || prefix.len() >= 64 * 1024 {
            break;
        }
    }
    let encoding = |what: &str| IngestError::Encoding {
        file: name.to_string(),
        line: 1,
        what: what.to_string(),
    };
    if prefix.starts_with(&[0xFF, 0xFE]) {
        return Err(encoding(
            "the file is UTF-16 (little-endian byte-order mark)",
        ));
    }
    if prefix.starts_with(&[0xFE, 0xFF]) {
        return Err(encoding("the file is UTF-16 (big-endian byte-order mark)"));
    }
    if prefix.contains(&0) {
        return Err(encoding(
            "the file contains NUL bytes: it is UTF-16 without a byte-order mark, or not text",
        ));
    }
    let bom = if prefix.starts_with(&[0xEF, 0xBB, 0xBF]) {
        3
    } else {
        0
    };
    let delimiter = opts
        .delimiter
        .unwrap_or_else(|| crate::units::detect_delimiter(&prefix[bom..]));
    Ok(Prefix {
        bytes: prefix,
        bom,
        delimiter,
    })
}

/// Read one input. Streaming: calls `sink` for every accepted record and
/// `reject` for every rejected one; memory does not grow with the number of
/// records. `name` labels the input in every message.
pub fn ingest<R: Read>(
    name: &str,
    reader: R,
    opts: &IngestOptions,
    sink: &mut dyn FnMut(FleetRow),
    reject: &mut dyn FnMut(Rejected),
) -> Result<IngestStats, IngestError> {
    let mut each = EachRow {
        sink,
        row: FleetRow::blank(),
    };
    ingest_to(name, reader, opts, &mut each, reject)
}

/// [`ingest`] into a [`RowSink`].
fn ingest_to<R: Read>(
    name: &str,
    reader: R,
    opts: &IngestOptions,
    sink: &mut dyn RowSink,
    reject: &mut dyn FnMut(Rejected),
) -> Result<IngestStats, IngestError> {
    let mut reader = reader;
    let prefix = read_prefix(name, &mut reader, opts)?;
    let delimiter = prefix.delimiter;
    // The BOM is skipped before the guard so that its offsets are the CSV reader's.
    let mut head = io::Cursor::new(prefix.bytes);
    head.set_position(prefix.bom as u64);
    let mut rdr = RecordReader::new(head.chain(reader), delimiter);
    let (header_line, header) = read_header(name, &mut rdr)?;
    let (mut parser, mut stats) =
        parse_header(name, header.as_ref(), header_line, delimiter, opts)?;
    let mut counts = RecordCounts::default();
    read_records(name, &mut rdr, &mut parser, 0, &mut counts, sink, reject)?;
    counts.finish(name, &mut stats);
    Ok(stats)
}

/// The first record (the header) and its line, or `None` for an input
/// without records.
fn read_header<R: Read>(
    name: &str,
    rdr: &mut RecordReader<R>,
) -> Result<(u64, Option<csv::ByteRecord>), IngestError> {
    match rdr.advance() {
        Ok(Some(line)) => Ok((line, Some(rdr.record().to_byte_record()))),
        Ok(None) => Ok((rdr.current_line(), None)),
        Err(e) => Err(read_error(name, e, 0)),
    }
}

/// Records read by [`read_records`], added up over the pieces of an input.
#[derive(Clone, Copy, Debug, Default)]
pub(crate) struct RecordCounts {
    read: u64,
    accepted: u64,
    rejected: u64,
    blank: u64,
}

impl RecordCounts {
    pub(crate) fn add(&mut self, other: RecordCounts) {
        self.read += other.read;
        self.accepted += other.accepted;
        self.rejected += other.rejected;
        self.blank += other.blank;
    }

    /// Put the counts, and the notices they call for, into the input's stats.
    pub(crate) fn finish(self, name: &str, stats: &mut IngestStats) {
        stats.rows_read += self.read;
        stats.rows_accepted += self.accepted;
        stats.rows_rejected += self.rejected;
        if self.blank > 0 {
            stats.notices.push(format!(
                "{name}: skipped {} record{} with every field empty",
                self.blank,
                if self.blank == 1 { "" } else { "s" }
            ));
        }
        if self.read == 0 {
            stats.notices.push(format!(
                "{name}: the header is there but no readings follow"
            ));
        }
    }
}

/// Judge the header record (`None` when the input had no record at all).
fn parse_header<'o>(
    name: &str,
    rec: Option<&csv::ByteRecord>,
    header_line: u64,
    delimiter: u8,
    opts: &'o IngestOptions,
) -> Result<(RowParser<'o>, IngestStats), IngestError> {
    let file: Arc<str> = Arc::from(name);
    let rec = match rec {
        Some(rec)
            if !rec
                .iter()
                .all(|f| f.iter().all(|b| b.is_ascii_whitespace())) =>
        {
            rec
        }
        _ => {
            return Err(IngestError::Empty {
                file: name.to_string(),
            })
        }
    };
    check_utf8(rec.as_slice(), rec.iter(), &[]).map_err(|what| IngestError::Encoding {
        file: name.to_string(),
        line: header_line,
        what,
    })?;
    let names: Vec<String> = rec
        .iter()
        .map(|f| String::from_utf8_lossy(f).trim().to_string())
        .collect();
    let mut idx = [None; COLUMNS.len()];
    let mut unknown = Vec::new();
    for (i, n) in names.iter().enumerate() {
        let lower = n.to_ascii_lowercase();
        match COLUMNS.iter().find(|(_, c)| *c == lower) {
            Some((col, cname)) => {
                if let Some(first) = idx[*col as usize] {
                    return Err(IngestError::DuplicateColumn {
                        file: name.to_string(),
                        line: header_line,
                        column: cname.to_string(),
                        first: first + 1,
                        second: i + 1,
                    });
                }
                idx[*col as usize] = Some(i);
            }
            None if n.is_empty() => unknown.push(format!("(unnamed field {})", i + 1)),
            None => unknown.push(n.clone()),
        }
    }
    let has = |c: Col| idx[c as usize].is_some();
    if !COLUMNS.iter().any(|(c, _)| has(*c)) {
        let found = show(&names.join(&(delimiter as char).to_string()));
        return Err(IngestError::NoHeader {
            file: name.to_string(),
            line: header_line,
            found,
        });
    }
    let default_profile = opts
        .default_profile
        .as_deref()
        .map(str::trim)
        .filter(|p| !p.is_empty())
        .map(|p| Arc::<str>::from(p.to_ascii_lowercase()));
    let missing = |column: &str| {
        let near = unknown
            .iter()
            .map(|u| {
                (
                    strsim::damerau_levenshtein(&u.to_ascii_lowercase(), column),
                    u,
                )
            })
            .filter(|(d, _)| *d <= 3)
            .min();
        IngestError::MissingColumn {
            file: name.to_string(),
            line: header_line,
            column: column.to_string(),
            hint: match near {
                Some((_, u)) => format!(" (found `{u}`: did you mean `{column}`?)"),
                None if delimiter != b',' || names.len() > 1 => String::new(),
                None => " (is the delimiter right? the header has one field)".to_string(),
            },
        }
    };
    for c in [Col::UnitId, Col::TakenAt] {
        if !has(c) {
            return Err(missing(col_name(c)));
        }
    }
    if !has(Col::Volts) && !has(Col::Sg) {
        return Err(missing("volts` or `sg"));
    }
    if !has(Col::Profile) && default_profile.is_none() {
        return Err(IngestError::MissingColumn {
            file: name.to_string(),
            line: header_line,
            column: "profile".to_string(),
            hint: " (or give a default profile)".to_string(),
        });
    }
    if has(Col::TempC) && has(Col::TempF) {
        return Err(IngestError::ConflictingColumns {
            file: name.to_string(),
            line: header_line,
            a: "temp_c".to_string(),
            b: "temp_f".to_string(),
        });
    }

    let mut stats = IngestStats {
        unknown_columns: unknown.clone(),
        ..IngestStats::default()
    };
    if !unknown.is_empty() {
        stats.notices.push(format!(
            "{name}: ignoring column{} {}",
            if unknown.len() == 1 { "" } else { "s" },
            unknown
                .iter()
                .map(|u| format!("`{u}`"))
                .collect::<Vec<_>>()
                .join(", ")
        ));
    }
    let parser = RowParser {
        file: file.clone(),
        width: names.len(),
        names,
        idx,
        delimiter,
        opts,
        default_profile,
        known: opts
            .known_profiles
            .as_ref()
            .map(|k| k.iter().cloned().collect()),
        last_known: None,
        now_text: opts
            .now
            .map(|t| t.format("%Y-%m-%d %H:%M").to_string())
            .unwrap_or_default(),
        units: Interner::default(),
        profiles: Interner::default(),
        sites: Interner::default(),
        strings: Interner::default(),
    };

    Ok((parser, stats))
}

/// Read the records that follow the header from `rdr`, whose line 1 is the
/// input's line `line_offset + 1`.
fn read_records<R: Read>(
    name: &str,
    rdr: &mut RecordReader<R>,
    parser: &mut RowParser<'_>,
    line_offset: u64,
    counts: &mut RecordCounts,
    sink: &mut dyn RowSink,
    reject: &mut dyn FnMut(Rejected),
) -> Result<(), IngestError> {
    let mut problems = String::new();
    loop {
        let line = match rdr.advance() {
            Ok(Some(line)) => line + line_offset,
            Ok(None) => break,
            Err(e) => return Err(read_error(name, e, line_offset)),
        };
        if rdr.record().is_blank() {
            counts.blank += 1;
            continue;
        }
        counts.read += 1;
        let text = match std::str::from_utf8(rdr.record().bytes) {
            Ok(text) => text,
            Err(_) => {
                // The record's fields end to end are what must be UTF-8.
                rdr.join_fields();
                let rec = rdr.record();
                match check_utf8(rec.bytes, rec.iter(), &parser.names) {
                    Ok(text) => text,
                    Err(what) => {
                        return Err(IngestError::Encoding {
                            file: name.to_string(),
                            line,
                            what,
                        })
                    }
                }
            }
        };
        if parser.parse(&rdr.record(), text, line, &mut problems, sink) {
            counts.accepted += 1;
        } else {
            counts.rejected += 1;
            reject(Rejected {
                file: name.to_string(),
                line,
                reason: std::mem::take(&mut problems),
            });
        }
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;
    use approx::assert_relative_eq;

    /// A row filled again holds the new record's fields and nothing of the
    /// old one's: rows with a note, an SG list, a site and a string, then
    /// rows without, and names that change, give through a [`RowBatch`]
    /// what fresh rows give.
    #[test]
    fn a_recycled_row_is_a_fresh_row() {
        let head = "unit_id,taken_at,profile,site,string,volts,sg,temp_c,rest_h,after,note\n";
        let first = format!(
            "{head}A1,2024-03-01 08:00,flooded-automotive,north,S1,12.6,1.265;1.270;1.262;1.268;1.266;1.264,20,24,idle,loose lid\n\
             A2,2024-03-01 08:10,flooded-automotive,north,S2,12.5,1.250,-4,12,charge,\n\
             A3,2024-03-01 08:20,agm,south,S2,12.7,,21,30,discharge,checked\n"
        );
        let second = format!(
            "{head}B1,2024-03-02 09:00,agm,,,12.4,,,,,\n\
             B2,2024-03-02 09:05,AGM,south,,,1.240,19,2,idle,new note\n\
             B3,not a time,agm,south,S1,12.4,,,,,\n\
             B4,2024-03-02 09:15,flooded-automotive,west,S9,12.1,1.2,30,1,idle,\n\
             B5,2024-03-02 09:20,flooded-automotive,west,S9,12.2,,,,,\n"
        );
        let opts = IngestOptions::default();
        let mut batch = RowBatch::default();
        for text in [&first, &second] {
            batch.reset();
            let (mut fresh, mut rej) = (Vec::new(), 0);
            ingest(
                "in.csv",
                text.as_bytes(),
                &opts,
                &mut |r| fresh.push(r),
                &mut |_| rej += 1,
            )
            .unwrap();
            let mut rej_batch = 0;
            ingest_to("in.csv", text.as_bytes(), &opts, &mut batch, &mut |_| {
                rej_batch += 1
            })
            .unwrap();
            assert_eq!(rej, rej_batch);
            assert_eq!(batch.rows_mut(), &fresh[..]);
        }
        // The second text left a rejected row in a slot and had more rows.
        assert_eq!(batch.rows_mut().len(), 4);
    }

    type Run = (Vec<FleetRow>, Vec<Rejected>, IngestStats);

    fn run_opts(text: &[u8], opts: &IngestOptions) -> Result<Run, IngestError> {
        let (mut rows, mut rejects) = (Vec::new(), Vec::new());
        let stats = ingest("in.csv", text, opts, &mut |r| rows.push(r), &mut |r| {
            rejects.push(r)
        })?;
        // Every record read is accounted for, once.
        assert_eq!(stats.rows_read, stats.rows_accepted + stats.rows_rejected);
        assert_eq!(stats.rows_accepted, rows.len() as u64);
        assert_eq!(stats.rows_rejected, rejects.len() as u64);
        Ok((rows, rejects, stats))
    }

    fn run(text: &str) -> Result<Run, IngestError> {
        run_opts(text.as_bytes(), &IngestOptions::default())
    }

    const BASIC: &str = "unit_id,taken_at,volts,profile\n\
        B1,2024-03-01 08:30,12.41,flooded-automotive\n\
        B2,2024-03-01 08:35,12.65,agm\n";

    #[test]
    fn comma_semicolon_and_tab_give_the_same_rows() {
        let (comma, rej, _) = run(BASIC).unwrap();
        assert!(rej.is_empty());
        for d in [";", "\t"] {
            let (rows, rej, _) = run(&BASIC.replace(',', d)).unwrap();
            assert!(rej.is_empty(), "{rej:?}");
            assert_eq!(rows, comma);
        }
        // The values are the ones written (format spec: volts as typed).
        assert_relative_eq!(comma[0].volts.unwrap().0, 12.41);
        assert_eq!(&*comma[1].profile, "agm");
        assert_eq!(comma[1].source.line, 3);
        assert_eq!(comma[1].source.to_string(), "in.csv:3");
    }

    #[test]
    fn a_given_delimiter_overrides_detection() {
        let opts = IngestOptions {
            delimiter: Some(b';'),
            ..IngestOptions::default()
        };
        let err = run_opts(BASIC.as_bytes(), &opts).unwrap_err();
        assert!(matches!(err, IngestError::NoHeader { .. }), "{err}");
    }

    #[test]
    fn bom_and_crlf_are_accepted() {
        let text = format!("\u{feff}{}", BASIC.replace('\n', "\r\n"));
        let (rows, rej, _) = run(&text).unwrap();
        assert!(rej.is_empty(), "{rej:?}");
        assert_eq!(rows.len(), 2);
        assert_eq!(&*rows[0].unit_id, "B1");
        assert_eq!(rows[1].source.line, 3);
        assert_eq!(rows[1].profile.as_ref(), "agm");
    }

    #[test]
    fn decimal_comma_and_quoted_sg_list_in_a_semicolon_file() {
        let text = "unit_id;taken_at;volts;sg;cells;temp_c;profile\n\
            B1;2024-03-01 08:30;12,41;\"1,265;1,270;1,262;1,268;1,266;1,264\";6;-4,5;flooded-automotive\n\
            B2;2024-03-01 08:30;12,41;1,265;6;20;flooded-automotive\n\
            B3;2024-03-01 08:30;12,41;1,265;1,270;6;20;flooded-automotive\n";
        let (rows, rej, _) = run(text).unwrap();
        assert_eq!(rows.len(), 2, "{rej:?}");
        assert_relative_eq!(rows[0].volts.unwrap().0, 12.41);
        assert_relative_eq!(rows[0].temperature.unwrap().0, -4.5);
        let sg: Vec<f64> = rows[0].sg.iter().map(|s| s.0).collect();
        assert_eq!(sg, vec![1.265, 1.270, 1.262, 1.268, 1.266, 1.264]);
        // One mean value is allowed whatever the cell count.
        assert_eq!(rows[1].sg.len(), 1);
        // Unquoted list: too many fields, with the hint.
        assert_eq!(rej.len(), 1);
        assert_eq!(rej[0].line, 4);
        assert!(
            rej[0].reason.contains("must be quoted"),
            "{}",
            rej[0].reason
        );
    }

    #[test]
    fn unknown_columns_get_one_notice() {
        let text = "unit_id,taken_at,volts,profile,inspector,Colour\n\
            B1,2024-03-01 08:30,12.41,agm,ann,red\n\
            B2,2024-03-01 08:30,12.41,agm,bob,blue\n\
            B3,2024-03-01 08:30,12.41,agm,cy,green\n";
        let (rows, _, stats) = run(text).unwrap();
        assert_eq!(rows.len(), 3);
        assert_eq!(stats.unknown_columns, vec!["inspector", "Colour"]);
        let about: Vec<_> = stats
            .notices
            .iter()
            .filter(|n| n.contains("inspector"))
            .collect();
        assert_eq!(about.len(), 1);
        assert!(about[0].contains("Colour"));
    }

    #[test]
    fn header_names_are_trimmed_and_case_insensitive() {
        let text = " Unit_ID ,TAKEN_AT, Volts ,Profile\nB1,2024-03-01 08:30,12.41,AGM\n";
        let (rows, rej, stats) = run(text).unwrap();
        assert!(rej.is_empty() && stats.unknown_columns.is_empty());
        // Profile ids are matched in lower case.
        assert_eq!(&*rows[0].profile, "agm");
    }

    #[test]
    fn missing_required_columns_are_named() {
        let err = run("unit_id,volts,profile\nB1,12.4,agm\n").unwrap_err();
        assert!(
            matches!(&err, IngestError::MissingColumn { column, .. } if column == "taken_at"),
            "{err}"
        );
        assert!(err.to_string().starts_with("in.csv:1:"), "{err}");
        let err = run("unit_id,taken at,volts,profile\nB1,2024-03-01 08:30,12.4,agm\n")
            .unwrap_err()
            .to_string();
        assert!(err.contains("did you mean `taken_at`"), "{err}");
        let err = run("unit_id,taken_at,profile\nB1,2024-03-01 08:30,agm\n")
            .unwrap_err()
            .to_string();
        assert!(err.contains("`volts` or `sg`"), "{err}");
        let err = run("unit_id,taken_at,volts\nB1,2024-03-01 08:30,12.4\n")
            .unwrap_err()
            .to_string();
        assert!(err.contains("`profile`"), "{err}");
        // With a default profile the column is optional and the default fills in.
        let opts = IngestOptions {
            default_profile: Some("agm".into()),
            ..IngestOptions::default()
        };
        let (rows, _, _) =
            run_opts(b"unit_id,taken_at,volts\nB1,2024-03-01 08:30,12.4\n", &opts).unwrap();
        assert_eq!(&*rows[0].profile, "agm");
    }

    #[test]
    fn duplicated_and_conflicting_headers() {
        let err = run("unit_id,taken_at,Volts, volts ,profile\n").unwrap_err();
        assert!(
            matches!(&err, IngestError::DuplicateColumn { column, first: 3, second: 4, .. } if column == "volts"),
            "{err}"
        );
        let err = run("unit_id,taken_at,volts,profile,temp_c,temp_f\n").unwrap_err();
        assert!(
            matches!(err, IngestError::ConflictingColumns { .. }),
            "{err}"
        );
    }

    #[test]
    fn empty_no_header_and_header_only() {
        assert!(matches!(run(""), Err(IngestError::Empty { .. })));
        assert!(matches!(run("\n\r\n\n"), Err(IngestError::Empty { .. })));
        assert!(matches!(run("\u{feff}"), Err(IngestError::Empty { .. })));
        let err = run("B1,2024-03-01 08:30,12.41,agm\n").unwrap_err();
        assert!(matches!(err, IngestError::NoHeader { .. }), "{err}");
        let (rows, rej, stats) = run("unit_id,taken_at,volts,profile\n").unwrap();
        assert!(rows.is_empty() && rej.is_empty());
        assert_eq!(stats.rows_read, 0);
        assert!(stats.notices.iter().any(|n| n.contains("no readings")));
        // Without a final line end the header is still a header.
        assert!(run("unit_id,taken_at,volts,profile").is_ok());
    }

    #[test]
    fn a_quoted_field_left_open_at_the_end_keeps_its_line() {
        // The open quote swallows the line end: the record is still the one
        // that starts on line 3.
        let (_, rejects, _) =
            run("unit_id,taken_at,volts,profile\nA,2024-03-01 08:00,12.6,agm\nB,\":\n").unwrap();
        assert_eq!(rejects.len(), 1, "{rejects:?}");
        assert_eq!(rejects[0].line, 3, "{rejects:?}");
    }

    #[test]
    fn a_truncated_last_line_is_rejected_with_its_line() {
        let text = format!("{BASIC}B3,2024-03-0");
        let (rows, rej, _) = run(&text).unwrap();
        assert_eq!(rows.len(), 2);
        assert_eq!(rej.len(), 1);
        assert_eq!(rej[0].line, 4);
        assert!(
            rej[0]
                .reason
                .contains("column `volts` and after are missing"),
            "{}",
            rej[0].reason
        );
        // A last line that is complete but lacks its line end is fine.
        let (rows, rej, _) = run(BASIC.trim_end()).unwrap();
        assert_eq!((rows.len(), rej.len()), (2, 0));
    }

    #[test]
    fn utf16_is_refused_with_advice() {
        let mut le = vec![0xFF, 0xFE];
        for u in BASIC.encode_utf16() {
            le.extend_from_slice(&u.to_le_bytes());
        }
        let err = run_opts(&le, &IngestOptions::default())
            .unwrap_err()
            .to_string();
        assert!(
            err.contains("in.csv") && err.contains("UTF-16") && err.contains("re-save"),
            "{err}"
        );
        // Without a byte-order mark: the NUL bytes give it away.
        let err = run_opts(&le[2..], &IngestOptions::default()).unwrap_err();
        assert!(matches!(err, IngestError::Encoding { .. }), "{err}");
        let mut be = vec![0xFE, 0xFF];
        for u in BASIC.encode_utf16() {
            be.extend_from_slice(&u.to_be_bytes());
        }
        assert!(run_opts(&be, &IngestOptions::default()).is_err());
    }

    #[test]
    fn latin1_is_refused_naming_line_and_column() {
        let mut text = b"unit_id,taken_at,volts,profile,note\nB1,2024-03-01 08:30,12.41,agm,ok\nB2,2024-03-01 08:30,12.41,agm,K".to_vec();
        text.push(0xFC); // 'ü' in Latin-1
        text.extend_from_slice(b"hlraum\n");
        let err = run_opts(&text, &IngestOptions::default()).unwrap_err();
        let msg = err.to_string();
        assert!(
            matches!(err, IngestError::Encoding { line: 3, .. }),
            "{msg}"
        );
        assert!(
            msg.contains("Latin-1") && msg.contains("`note`") && msg.contains("UTF-8"),
            "{msg}"
        );
        // In the header too.
        let err = run_opts(
            b"unit_id,taken_at,volts,profile,temp_\xb0C\n",
            &IngestOptions::default(),
        )
        .unwrap_err();
        assert!(
            matches!(err, IngestError::Encoding { line: 1, .. }),
            "{err}"
        );
    }

    #[test]
    fn a_10_mb_field_rejects_its_record_only() {
        let mut text = String::from("unit_id,taken_at,volts,profile,note\n");
        text.push_str("B1,2024-03-01 08:30,12.41,agm,");
        text.push_str(&"x".repeat(10 * 1024 * 1024));
        text.push_str("\nB2,2024-03-01 08:30,12.41,agm,fine\n");
        let (rows, rej, _) = run(&text).unwrap();
        assert_eq!(rows.len(), 1);
        assert_eq!(&*rows[0].unit_id, "B2");
        assert_eq!(rej[0].line, 2);
        assert!(
            rej[0].reason.contains("`note`") && rej[0].reason.contains("64 KiB"),
            "{}",
            rej[0].reason
        );
        // The message stays short: it does not carry the field.
        assert!(rej[0].reason.len() < 200);
    }

    #[test]
    fn a_read_error_names_the_line_after_the_last_line_end_read() {
        // Gives `text`, in reads of `step` bytes, then fails.
        struct FailsAfter {
            text: &'static [u8],
            step: usize,
        }
        impl io::Read for FailsAfter {
            fn read(&mut self, buf: &mut [u8]) -> io::Result<usize> {
                if self.text.is_empty() {
                    return Err(io::Error::other("cable pulled"));
                }
                let n = self.step.min(buf.len()).min(self.text.len());
                buf[..n].copy_from_slice(&self.text[..n]);
                self.text = &self.text[n..];
                Ok(n)
            }
        }
        // Four line ends read (one inside a quoted note) before the input
        // fails: the failure is on line 5, whatever the size of the reads.
        let text: &'static [u8] = b"unit_id,taken_at,volts,profile,note\n\
            B1,2024-03-01 08:30,12.41,agm,\"two\nlines\"\n\
            B2,2024-03-01 08:35,12.65,agm,x\nB3,2024-03-0";
        for step in [1, 7, 4096] {
            let err = ingest(
                "in.csv",
                FailsAfter { text, step },
                &IngestOptions::default(),
                &mut |_| {},
                &mut |_| {},
            )
            .unwrap_err();
            assert!(
                matches!(err, IngestError::Io { line: 5, .. }),
                "step {step}: {err}"
            );
        }
    }

    #[test]
    fn a_line_without_end_stops_the_file_before_memory_does() {
        let mut text =
            String::from("unit_id,taken_at,volts,profile,note\nB1,2024-03-01 08:30,12.41,agm,");
        text.push_str(&"x".repeat(MAX_LINE_BYTES as usize + 1));
        let err = run(&text).unwrap_err();
        assert!(
            matches!(err, IngestError::LineTooLong { line: 2, .. }),
            "{err}"
        );
    }

    #[test]
    fn future_timestamps_are_rejected_and_order_does_not_matter() {
        let text = "unit_id,taken_at,volts,profile\n\
            B1,2024-03-05 08:30,12.41,agm\n\
            B1,2024-03-01 08:30,12.45,agm\n\
            B1,2031-01-01 00:00,12.45,agm\n";
        let opts = IngestOptions {
            now: parse_timestamp("2024-06-01 00:00"),
            ..IngestOptions::default()
        };
        let (rows, rej, _) = run_opts(text.as_bytes(), &opts).unwrap();
        assert_eq!(rows.len(), 2);
        assert!(rows[0].taken_at > rows[1].taken_at);
        assert_eq!(rej[0].line, 4);
        assert!(rej[0].reason.contains("`taken_at`") && rej[0].reason.contains("future"));
    }

    #[test]
    fn timestamps_rfc3339_to_utc_and_local_as_written() {
        let t = |s: &str| parse_timestamp(s).map(|t| t.to_string());
        // RFC 3339 §4.2: local time = UTC + offset, so 08:30+02:00 is 06:30Z.
        assert_eq!(
            t("2024-03-01T08:30:00+02:00").as_deref(),
            Some("2024-03-01 06:30:00")
        );
        assert_eq!(
            t("2024-03-01T08:30:00-0130").as_deref(),
            Some("2024-03-01 10:00:00")
        );
        assert_eq!(
            t("2024-03-01T23:30:00.25-01:00").as_deref(),
            Some("2024-03-02 00:30:00.250")
        );
        assert_eq!(
            t("2024-03-01t08:30:00z").as_deref(),
            Some("2024-03-01 08:30:00")
        );
        for local in [
            "2024-03-01 08:30",
            "2024-03-01T08:30",
            "2024-03-01 08:30:00",
        ] {
            assert_eq!(t(local).as_deref(), Some("2024-03-01 08:30:00"), "{local}");
        }
        for bad in [
            "2024-02-30 08:30",
            "2024-03-01 24:00",
            "2024-03-01 08:30:",
            "2024-03-01 08:30+25:00",
            "01/03/2024 08:30",
            "2024-03-01",
            "2024-03-01 08:30:00.",
            "2024-03-01 08:30 UTC",
        ] {
            assert_eq!(t(bad), None, "{bad}");
        }
    }

    #[test]
    fn every_bad_row_names_file_line_and_column() {
        let header = "unit_id,taken_at,volts,sg,cells,temp_c,rest_h,after,position,ohmic_mohm,float_current_a,profile";
        // (record, column the reason must name, extra words it must contain)
        let cases: &[(&str, &str, &str)] = &[
            (",2024-03-01 08:30,12.4,,,,,,,,,agm", "unit_id", "empty"),
            ("B,yesterday,12.4,,,,,,,,,agm", "taken_at", "RFC 3339"),
            (
                "B,2024-03-01 08:30,abc,,,,,,,,,agm",
                "volts",
                "not a number",
            ),
            (
                "B,2024-03-01 08:30,NaN,,,,,,,,,agm",
                "volts",
                "not a number",
            ),
            ("B,2024-03-01 08:30,1500,,,,,,,,,agm", "volts", "absurd"),
            ("B,2024-03-01 08:30,,,,,,,,,,agm", "volts", "sg` is empty"),
            ("B,2024-03-01 08:30,,1.5,,,,,,,,agm", "sg", "outside"),
            ("B,2024-03-01 08:30,,1265,,,,,,,,agm", "sg", "points"),
            ("B,2024-03-01 08:30,,1.2;;1.2,,,,,,,,agm", "sg", "value 2"),
            (
                "B,2024-03-01 08:30,,1.2;1.2,6,,,,,,,agm",
                "sg",
                "2 values for 6 cells",
            ),
            ("B,2024-03-01 08:30,12.4,,0,,,,,,,agm", "cells", "1–400"),
            ("B,2024-03-01 08:30,12.4,,401,,,,,,,agm", "cells", "1–400"),
            (
                "B,2024-03-01 08:30,12.4,,,95,,,,,,agm",
                "temp_c",
                "was it °F?",
            ),
            (
                "B,2024-03-01 08:30,12.4,,,-300,,,,,,agm",
                "temp_c",
                "outside",
            ),
            (
                "B,2024-03-01 08:30,12.4,,,,-2,,,,,agm",
                "rest_h",
                "negative",
            ),
            (
                "B,2024-03-01 08:30,12.4,,,,100000,,,,,agm",
                "rest_h",
                "10 years",
            ),
            (
                "B,2024-03-01 08:30,12.4,,,,soon,,,,,agm",
                "rest_h",
                "not a rest time",
            ),
            (
                "B,2024-03-01 08:30,12.4,,,,,resting,,,,agm",
                "after",
                "charge, discharge",
            ),
            (
                "B,2024-03-01 08:30,12.4,,,,,,x,,,agm",
                "position",
                "whole number",
            ),
            (
                "B,2024-03-01 08:30,12.4,,,,,,,-1,,agm",
                "ohmic_mohm",
                "above 0",
            ),
            (
                "B,2024-03-01 08:30,12.4,,,,,,,,1e9,agm",
                "float_current_a",
                "absurd",
            ),
            (
                "B,2024-03-01 08:30,12.4,,,,,,,,,agn",
                "profile",
                "did you mean 'agm'",
            ),
            ("B,2024-03-01 08:30,12.4,,,,,,,,,", "profile", "no default"),
            (
                "B,2024-03-01 08:30,12.4,,,,,,,,agm",
                "profile",
                "found 11 fields",
            ),
        ];
        let mut text = format!("{header}\n");
        for (row, _, _) in cases {
            text.push_str(row);
            text.push('\n');
        }
        let opts = IngestOptions {
            known_profiles: Some(vec!["agm".into(), "gel".into()]),
            ..IngestOptions::default()
        };
        let (rows, rej, stats) = run_opts(text.as_bytes(), &opts).unwrap();
        assert!(rows.is_empty(), "{rows:?}");
        assert_eq!(stats.rows_read, cases.len() as u64);
        for (i, ((_, col, words), r)) in cases.iter().zip(&rej).enumerate() {
            let line = i as u64 + 2;
            assert_eq!(r.line, line);
            assert_eq!(r.file, "in.csv");
            let shown = r.to_string();
            assert!(shown.starts_with(&format!("in.csv:{line}: ")), "{shown}");
            assert!(
                r.reason.contains(&format!("`{col}`")),
                "line {line}: {shown}"
            );
            assert!(r.reason.contains(words), "line {line}: {shown}");
        }
    }

    #[test]
    fn near_zero_and_negative_volts_are_kept_for_the_analysis() {
        let text = "unit_id,taken_at,volts,profile,after,rest_h\n\
            B1,2024-03-01 08:30,0,agm,,\n\
            B2,2024-03-01 08:30,-0.31,agm,Float,\n\
            B3,2024-03-01 08:30,\u{2212}0.2,agm,unknown,1h30m\n";
        let (rows, rej, _) = run(text).unwrap();
        assert!(rej.is_empty(), "{rej:?}");
        assert_eq!(rows[0].volts, Some(Volts(0.0)));
        assert_eq!(rows[1].volts, Some(Volts(-0.31)));
        assert_eq!(rows[1].after, After::Float);
        assert_eq!(rows[2].volts, Some(Volts(-0.2)));
        assert_eq!(rows[2].rest, Some(Hours(1.5)));
        assert_eq!(rows[0].rest, None);
    }

    #[test]
    fn fahrenheit_optional_fields_and_shared_names() {
        let text = "unit_id,taken_at,volts,profile,temp_f,site,string,position,cells,ohmic_mohm,baseline_mohm,note,float_current_a,ambient_c\n\
            B1,2024-03-01 08:30,2.23,flooded-stationary,77,North Yard,S1,7,1,0.31,0.30,\"topped up, level ok\",0.2,21.5\n\
            B2,2024-03-01 08:30,2.23,flooded-stationary,32,North Yard,S1,8,1,,,,,\n";
        let (rows, rej, _) = run(text).unwrap();
        assert!(rej.is_empty(), "{rej:?}");
        let r = &rows[0];
        // 77 °F = 25 °C and 32 °F = 0 °C (definition of the Fahrenheit scale).
        assert_relative_eq!(r.temperature.unwrap().0, 25.0, epsilon = 1e-9);
        assert_relative_eq!(rows[1].temperature.unwrap().0, 0.0, epsilon = 1e-9);
        assert_eq!(r.site.as_deref(), Some("North Yard"));
        assert_eq!((r.position, r.cells), (Some(7), Some(1)));
        assert_eq!(r.ohmic, Some(Milliohms(0.31)));
        assert_eq!(r.baseline_ohmic, Some(Milliohms(0.30)));
        assert_eq!(r.note.as_deref(), Some("topped up, level ok"));
        assert_eq!(r.float_current, Some(Amperes(0.2)));
        assert_eq!(r.ambient, Some(Celsius(21.5)));
        assert_eq!(rows[1].note, None);
        // Repeated names are one allocation.
        assert!(Arc::ptr_eq(
            r.site.as_ref().unwrap(),
            rows[1].site.as_ref().unwrap()
        ));
        assert!(Arc::ptr_eq(&r.profile, &rows[1].profile));
        assert!(Arc::ptr_eq(&r.source.file, &rows[1].source.file));
        // JSON output keeps plain strings.
        let json = serde_json::to_value(r).unwrap();
        assert_eq!(json["source"], "in.csv:2");
        assert_eq!(json["unit_id"], "B1");
        assert_eq!(json["after"], "unknown");
    }

    #[test]
    fn blank_records_are_skipped_and_multiline_fields_keep_line_numbers() {
        let text = "unit_id,taken_at,volts,profile,note\n\
            B1,2024-03-01 08:30,12.41,agm,\"two\nlines\"\n\
            ,,,,\n\
            \n\
            B2,2024-03-01 08:30,12.41,agm,\n";
        let (rows, rej, stats) = run(text).unwrap();
        assert!(rej.is_empty(), "{rej:?}");
        assert_eq!(rows[0].source.line, 2);
        assert_eq!(rows[1].source.line, 6);
        assert_eq!(stats.rows_read, 2);
        assert!(stats.notices.iter().any(|n| n.contains("skipped 1 record")));
    }

    #[test]
    fn capacity_is_read_in_ah_and_implausible_values_name_the_column() {
        let text = "unit_id,taken_at,volts,profile,after,capacity_ah\n\
            U1,2024-03-01 08:30,2.27,agm,float,100\n\
            U2,2024-03-01 08:30,2.27,agm,float,\n\
            U3,2024-03-01 08:30,2.27,agm,float,100000\n\
            U4,2024-03-01 08:30,2.27,agm,float,0\n\
            U5,2024-03-01 08:30,2.27,agm,float,-7\n\
            U6,2024-03-01 08:30,2.27,agm,float,lots\n";
        let (rows, rej, _) = run(text).unwrap();
        assert_eq!(rows.len(), 2, "{rej:?}");
        assert_eq!(rows[0].capacity, Some(crate::units::AmpHours(100.0)));
        // Empty means not given, not zero.
        assert_eq!(rows[1].capacity, None);
        let lines: Vec<u64> = rej.iter().map(|r| r.line).collect();
        assert_eq!(lines, [4, 5, 6, 7]);
        // 100000 Ah is beyond the largest stationary lead-acid cells (a few
        // thousand Ah, common practice): a typing error or mAh.
        for r in &rej[..3] {
            assert!(
                r.reason.contains("column `capacity_ah`")
                    && r.reason.contains("not a plausible rated capacity")
                    && r.reason.contains("0.5 to 20000 Ah"),
                "{r}"
            );
        }
        assert!(
            rej[3].reason.contains("column `capacity_ah`")
                && rej[3].reason.contains("ampere-hours"),
            "{}",
            rej[3]
        );
    }

    #[test]
    fn the_quick_trim_is_str_trim() {
        // The reference is the standard library's `str::trim` (Unicode
        // White_Space): every ASCII character and some Unicode spaces and
        // non-spaces at either end, alone and around a field.
        let mut ends: Vec<String> = (0u8..=127).map(|b| char::from(b).to_string()).collect();
        for c in [
            '\u{85}', '\u{a0}', '\u{1680}', '\u{2003}', '\u{2028}', '\u{3000}', 'é', '°', '€',
        ] {
            ends.push(c.to_string());
        }
        ends.push(String::new());
        for a in &ends {
            for z in &ends {
                for mid in ["", "12.41", " x ", "a b"] {
                    let s = format!("{a}{mid}{z}");
                    assert_eq!(trim(&s), s.trim(), "{s:?}");
                }
            }
        }
    }

    #[test]
    fn the_plain_decimal_path_gives_what_str_parse_gives() {
        use rand::{Rng, SeedableRng};
        // The reference is the standard library's correctly rounded
        // `str::parse::<f64>`: wherever the fast path answers, it must give
        // the same bits; the common field forms must take it.
        let mut rng = rand::rngs::StdRng::seed_from_u64(7);
        let alphabet = b"0123456789.-+e, x";
        let mut hits = 0;
        for _ in 0..200_000 {
            let len = rng.gen_range(0..24);
            let s: String = (0..len)
                .map(|_| {
                    // Mostly digits, so that long plain numbers are common.
                    if rng.gen_bool(0.8) {
                        char::from(b'0' + rng.gen_range(0..10))
                    } else {
                        char::from(alphabet[rng.gen_range(0..alphabet.len())])
                    }
                })
                .collect();
            if let Some(v) = plain_decimal(&s) {
                hits += 1;
                let want: f64 = s.parse().unwrap();
                assert_eq!(v.to_bits(), want.to_bits(), "{s:?}");
            }
        }
        assert!(hits > 20_000, "only {hits} strings took the fast path");
        for s in [
            "12.41",
            "-4.5",
            "+1.265",
            "0",
            "-0",
            "-0.0",
            "007.50",
            "0.1",
            "0.3",
            "2.056",
            "9007199254740992",
            "0.000000000000000001",
            "123456789012345.6",
        ] {
            let v = plain_decimal(s).unwrap_or_else(|| panic!("{s} is plain"));
            assert_eq!(v.to_bits(), s.parse::<f64>().unwrap().to_bits(), "{s}");
        }
        // Beyond the exact range, or not plain: the general path decides.
        for s in [
            "",
            "-",
            "+",
            ".",
            ".5",
            "5.",
            "1e3",
            "1,5",
            "1.2.3",
            "--1",
            "1-2",
            " 1",
            "inf",
            "NaN",
            "9007199254740993",
            "12345678901234567890",
            "0.00000000000000000000001",
        ] {
            assert_eq!(plain_decimal(s), None, "{s}");
        }
    }

    #[test]
    fn a_known_profile_stays_known_and_an_unknown_one_is_named_every_time() {
        // The last known profile is remembered; the one after it, and the
        // same name again, must still be judged on their own.
        let text = "unit_id,taken_at,volts,profile\n\
            B1,2024-03-01 08:30,12.41,agm\n\
            B2,2024-03-01 08:30,12.41,AGM\n\
            B3,2024-03-01 08:30,12.41,agn\n\
            B4,2024-03-01 08:30,12.41,agm\n\
            B5,2024-03-01 08:30,12.41,agn\n\
            B6,2024-03-01 08:30,12.41,gel\n";
        let opts = IngestOptions {
            known_profiles: Some(vec!["agm".into(), "gel".into()]),
            ..IngestOptions::default()
        };
        let (rows, rej, _) = run_opts(text.as_bytes(), &opts).unwrap();
        let units: Vec<&str> = rows.iter().map(|r| &*r.unit_id).collect();
        assert_eq!(units, ["B1", "B2", "B4", "B6"]);
        let lines: Vec<u64> = rej.iter().map(|r| r.line).collect();
        assert_eq!(lines, [4, 6]);
        for r in &rej {
            assert_eq!(
                r.reason,
                "column `profile`: unknown profile 'agn' (did you mean 'agm'?)"
            );
        }
    }

    #[test]
    fn a_line_is_split_in_place_as_csv_core_splits_it() {
        use rand::{Rng, SeedableRng};
        // The reference is csv_core, the csv crate's parser: every line
        // without a quote (the reader leaves those to csv_core) must give
        // its fields.
        let mut rng = rand::rngs::StdRng::seed_from_u64(11);
        let alphabet = b",;\tabx1 \xc3\xa9";
        let mut bounds = Vec::new();
        for _ in 0..50_000 {
            let len = rng.gen_range(0..40);
            let line: Vec<u8> = (0..len)
                .map(|_| alphabet[rng.gen_range(0..alphabet.len())])
                .collect();
            for delimiter in [b',', b';', b'\t'] {
                if line.is_empty() {
                    continue;
                }
                split_line(&line, delimiter, &mut bounds);
                let mut core = csv_core::ReaderBuilder::new().delimiter(delimiter).build();
                let (mut out, mut ends) = ([0u8; 64], [0usize; 64]);
                let (res, _, nout, nend) = core.read_record(&line, &mut out, &mut ends);
                assert_eq!(res, csv_core::ReadRecordResult::InputEmpty);
                let (res, _, _, last) = core.read_record(&[], &mut out[nout..], &mut ends[nend..]);
                assert_eq!(res, csv_core::ReadRecordResult::Record);
                let mut want = Vec::new();
                let mut from = 0;
                for &e in &ends[..nend + last] {
                    want.push(out[from..e].to_vec());
                    from = e;
                }
                let got: Vec<Vec<u8>> = bounds.iter().map(|&(a, b)| line[a..b].to_vec()).collect();
                assert_eq!(got, want, "{line:?}");
            }
        }
    }

    /// Hands out its bytes in pieces of pseudo-random sizes, so that records
    /// and line ends fall across reads.
    struct Pieces<'a> {
        data: &'a [u8],
        rng: rand::rngs::StdRng,
    }

    impl Read for Pieces<'_> {
        fn read(&mut self, out: &mut [u8]) -> io::Result<usize> {
            use rand::Rng;
            let most = out.len().min(self.data.len());
            let n = if most == 0 {
                0
            } else {
                self.rng.gen_range(1..=most.min(300))
            };
            out[..n].copy_from_slice(&self.data[..n]);
            self.data = &self.data[n..];
            Ok(n)
        }
    }

    #[test]
    fn the_record_reader_reads_what_the_csv_crate_reads() {
        use rand::{Rng, SeedableRng};
        // The reference is the csv crate's reader with the options this
        // module used to give it: the same fields for every record, and the
        // line is the one of the record's first byte, found from the csv
        // reader's position (where it began, before skipped line ends).
        let mut rng = rand::rngs::StdRng::seed_from_u64(3);
        let pieces = [
            &b"a"[..],
            b"12.5",
            b" ",
            b"\"",
            b",",
            b";",
            b"\t",
            b"\r",
            b"\n",
            b"\r\n",
            b"\xc3\xa9",
            b"\xef\xbb\xbf",
        ];
        for round in 0..3000 {
            let mut data = Vec::new();
            for _ in 0..rng.gen_range(0..60) {
                // Mostly plain text, so that most records are plain lines.
                let i = if rng.gen_bool(0.7) {
                    rng.gen_range(0..3)
                } else {
                    rng.gen_range(0..pieces.len())
                };
                data.extend_from_slice(pieces[i]);
            }
            if round % 100 == 0 {
                // A line longer than a read, and a quoted field across reads.
                data.extend(std::iter::repeat(b'x').take(70_000));
                data.extend_from_slice(b",\"q\nq\"\n");
            }
            let delimiter = [b',', b';', b'\t'][round % 3];
            let seed = rng.gen();
            let mut want = csv::ReaderBuilder::new()
                .delimiter(delimiter)
                .has_headers(false)
                .flexible(true)
                .buffer_capacity(64 * 1024)
                .from_reader(Pieces {
                    data: &data,
                    rng: rand::rngs::StdRng::seed_from_u64(seed),
                });
            let mut got = RecordReader::new(
                Pieces {
                    data: &data,
                    rng: rand::rngs::StdRng::seed_from_u64(seed),
                },
                delimiter,
            );
            // The csv crate drops a byte-order mark when its first read
            // (of 64 KiB asked) gives at least its 3 bytes.
            let stripped = data.starts_with(b"\xef\xbb\xbf") && {
                let mut first_read = Pieces {
                    data: &data,
                    rng: rand::rngs::StdRng::seed_from_u64(seed),
                };
                first_read.read(&mut vec![0; 64 * 1024]).unwrap() >= 3
            };
            let mut rec = csv::ByteRecord::new();
            loop {
                let start = want.position().byte() as usize;
                let more = want.read_byte_record(&mut rec).unwrap();
                let line = got.advance().unwrap();
                assert_eq!(line.is_some(), more, "{data:?}");
                let Some(line) = line else { break };
                let fields: Vec<&[u8]> = got.record().iter().collect();
                let expected: Vec<&[u8]> = rec.iter().collect();
                assert_eq!(fields, expected, "{data:?}");
                // Line ends skipped before the record, and a byte-order mark
                // dropped at the very start, are not the record's.
                let mut first = start;
                if first == 0 && stripped {
                    first = 3;
                }
                while matches!(data.get(first), Some(b'\r' | b'\n')) {
                    first += 1;
                }
                let before = memchr::memchr_iter(b'\n', &data[..first]).count() as u64;
                assert_eq!(line, 1 + before, "{data:?}");
            }
            // The same bytes held whole in memory read as they do from a
            // slice (a parser reused through `primed`).
            let mut slice = RecordReader::new(&data[..], delimiter);
            let core = primed(primed_core(delimiter));
            let mut whole = RecordReader::over(data.clone(), delimiter, core);
            loop {
                let line = slice.advance().unwrap();
                assert_eq!(whole.advance().unwrap(), line, "{data:?}");
                if line.is_none() {
                    break;
                }
                assert!(slice.record().iter().eq(whole.record().iter()), "{data:?}");
            }
            assert_eq!(whole.into_parts().1, data);
        }
    }

    #[test]
    fn an_overlong_line_held_in_memory_fails_where_it_fails_from_a_slice() {
        let mut data = b"a,b\nc,d\r\ne,\"f\ng\"\n".to_vec();
        data.extend(std::iter::repeat_n(b'x', MAX_LINE_BYTES as usize + 10));
        let mut slice = RecordReader::new(&data[..], b',');
        let mut whole = RecordReader::over(data.clone(), b',', primed_core(b','));
        for _ in 0..3 {
            assert_eq!(slice.advance().unwrap(), whole.advance().unwrap());
        }
        let (Err(ReadError::TooLong { line: a }), Err(ReadError::TooLong { line: b })) =
            (slice.advance(), whole.advance())
        else {
            panic!("both fail on the long line");
        };
        assert_eq!((a, b), (5, 5));
    }

    #[test]
    fn stats_merge_across_files() {
        let (_, _, mut a) =
            run("unit_id,taken_at,volts,profile,x\nB1,2024-03-01 08:30,1,agm,\n").unwrap();
        let (_, _, b) = run("unit_id,taken_at,volts,profile,x,y\nB1,bad,1,agm,,\n").unwrap();
        a.merge(b);
        assert_eq!((a.rows_read, a.rows_accepted, a.rows_rejected), (2, 1, 1));
        assert_eq!(a.unknown_columns, vec!["x", "y"]);
    }
}
