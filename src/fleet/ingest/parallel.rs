//! One input read on several threads.
//!
//! A reader thread cuts the input into chunks of about [`CHUNK_BYTES`] at
//! record boundaries; worker threads parse the chunks with the same row
//! parser as the one-thread path and fold each chunk's accepted rows into
//! one result (a fleet analysis works out every row's state of charge and
//! folds the chunk into the state's summaries, returning its rejects); the
//! calling thread receives the results in whatever order they finish and
//! hands them on.
//! That order differs from the file's, so this is for consumers whose
//! result does not depend on order, as the fleet summaries do not (see
//! [`crate::fleet::summary`]).
//!
//! A chunk is cut after a line end that is not inside a quoted field. To
//! know that, the cutter follows the CSV reader's own quoting rules (a quote
//! opens a quoted field only at the start of a field, `""` inside is a quote);
//! a chunk without any quote needs no scan. Each chunk is parsed from a fresh
//! CSV reader, which starts exactly as the one-thread reader stands after
//! that line end, and its line numbers are offset by the line ends before it.

use super::{
    parse_header, primed, primed_core, read_header, read_prefix, read_records, FleetRow,
    IngestError, IngestOptions, IngestStats, Quoting, RecordCounts, RecordReader, Rejected,
    RowBatch, RowParser, MAX_LINE_BYTES,
};
use crate::pool::Pool;
use std::io::{self, Read};
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::mpsc::{sync_channel, Receiver, SyncSender};
use std::sync::Mutex;

/// Target size of a chunk.
pub const CHUNK_BYTES: usize = 256 << 10;

/// How to share the work.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Parallelism {
    /// Worker threads (besides the reader and the caller).
    pub threads: usize,
    /// Target chunk size in bytes.
    pub chunk_bytes: usize,
}

/// Workers by default at most: one thread combines the workers' results,
/// and more workers than this mostly hold more chunks in memory.
pub const MAX_DEFAULT_THREADS: usize = 8;

impl Default for Parallelism {
    /// One worker per core up to [`MAX_DEFAULT_THREADS`], chunks of [`CHUNK_BYTES`].
    fn default() -> Parallelism {
        Parallelism {
            threads: std::thread::available_parallelism()
                .map_or(1, |n| n.get())
                .min(MAX_DEFAULT_THREADS),
            chunk_bytes: CHUNK_BYTES,
        }
    }
}

/// A piece of the input for a worker.
struct Chunk {
    bytes: Vec<u8>,
    /// Input line number of the chunk's first line.
    first_line: u64,
}

/// What a worker made of one chunk.
struct Piece<T> {
    folded: T,
    rejects: Vec<Rejected>,
    counts: RecordCounts,
    bytes: u64,
}

/// An error and the line of the chunk it arose in, so that the earliest one
/// in the input is the one reported, as on one thread.
type Failure = (u64, IngestError);

/// The offset just after the last byte of `buf` that ends a record: the last
/// `\n` outside quotes, else the last such `\r` (old Mac line ends). `buf`
/// starts at the start of a record.
fn cut_point(buf: &[u8], delimiter: u8) -> Option<usize> {
    if memchr::memchr(b'"', buf).is_none() {
        return memchr::memrchr(b'\n', buf)
            .or_else(|| memchr::memrchr(b'\r', buf))
            .map(|i| i + 1);
    }
    let (mut last_lf, mut last_cr) = (None, None);
    let mut state = Quoting::FieldStart;
    for (i, &b) in buf.iter().enumerate() {
        state = state.step(b, delimiter);
        if matches!(b, b'\n' | b'\r') && state == Quoting::FieldStart {
            if b == b'\n' {
                last_lf = Some(i + 1);
            } else {
                last_cr = Some(i + 1);
            }
        }
    }
    last_lf.or(last_cr)
}

fn count_line_ends(bytes: &[u8]) -> u64 {
    memchr::memchr_iter(b'\n', bytes).count() as u64
}

/// Read one input on `how.threads` worker threads. Each chunk's accepted
/// rows go to `fold` on a worker, which may leave anything in them (they are
/// filled again for the next chunk); its second argument is scratch space of
/// the worker's own, kept between chunks. What it returns goes to `sink` on
/// the calling thread, rejected rows to `reject`, both in no particular
/// order; `progress` is told the bytes read so far. The statistics and, for
/// inputs that cannot be read to the end, the error are those of
/// [`super::ingest`] (rows before the error may differ: more of the input
/// will have been read).
#[allow(clippy::too_many_arguments)]
pub fn ingest_parallel<R, T, W, F>(
    name: &str,
    reader: R,
    opts: &IngestOptions,
    how: Parallelism,
    fold: &F,
    sink: &mut dyn FnMut(T),
    reject: &mut dyn FnMut(Rejected),
    progress: &mut dyn FnMut(u64),
) -> Result<IngestStats, IngestError>
where
    R: Read + Send,
    T: Send,
    W: Default,
    F: Fn(&mut [FleetRow], &mut W) -> T + Sync,
{
    let mut reader = reader;
    let prefix = read_prefix(name, &mut reader, opts)?;
    let delimiter = prefix.delimiter;
    let body = &prefix.bytes[prefix.bom..];
    // The header record must end inside the prefix (it does unless a header
    // field is quoted across a line end); otherwise read on one thread.
    let Some(header_end) = cut_point_first(body, delimiter) else {
        let mut head = io::Cursor::new(prefix.bytes);
        head.set_position(prefix.bom as u64);
        let (mut rows, mut scratch) = (Vec::new(), W::default());
        let stats = super::ingest(
            name,
            head.chain(reader),
            opts,
            &mut |row| {
                rows.push(row);
                if rows.len() >= ONE_THREAD_BATCH_ROWS {
                    sink(fold(&mut rows, &mut scratch));
                    rows.clear();
                }
            },
            reject,
        );
        if !rows.is_empty() {
            sink(fold(&mut rows, &mut scratch));
        }
        return stats;
    };
    let mut rdr = RecordReader::new(&body[..header_end], delimiter);
    let (header_line, header) = read_header(name, &mut rdr)?;
    let (parser, mut stats) = parse_header(name, header.as_ref(), header_line, delimiter, opts)?;
    let first_data_line = 1 + count_line_ends(&body[..header_end]);
    let rest = body[header_end..].to_vec();
    drop(prefix);

    let threads = how.threads.max(1);
    let chunk_bytes = how.chunk_bytes.max(64);
    let stop = AtomicBool::new(false);
    let (chunk_tx, chunk_rx) = sync_channel::<Chunk>(threads * 2);
    let chunk_rx = Mutex::new(chunk_rx);
    let (piece_tx, piece_rx) = sync_channel::<Result<Piece<T>, Failure>>(threads * 2);
    let mut counts = RecordCounts::default();
    let mut first_failure: Option<Failure> = None;
    let buffers = Pool::default();

    std::thread::scope(|scope| {
        {
            let piece_tx = piece_tx.clone();
            let (stop, buffers) = (&stop, &buffers);
            scope.spawn(move || {
                if let Err(f) = cut_chunks(
                    name,
                    reader,
                    rest,
                    first_data_line,
                    delimiter,
                    chunk_bytes,
                    &chunk_tx,
                    stop,
                    buffers,
                ) {
                    let _ = piece_tx.send(Err(f));
                }
            });
        }
        for _ in 0..threads {
            let (chunk_rx, piece_tx) = (&chunk_rx, piece_tx.clone());
            let mut parser = parser.clone();
            parser.own_file_name();
            let (stop, buffers) = (&stop, &buffers);
            scope.spawn(move || work(name, chunk_rx, &piece_tx, &mut parser, fold, stop, buffers));
        }
        drop(piece_tx);
        let mut done = 0u64;
        for piece in piece_rx {
            match piece {
                Ok(p) => {
                    sink(p.folded);
                    p.rejects.into_iter().for_each(&mut *reject);
                    counts.add(p.counts);
                    done += p.bytes;
                    progress(done);
                }
                Err(f) => {
                    stop.store(true, Ordering::Relaxed);
                    let earlier = match &first_failure {
                        Some((line, _)) => f.0 < *line,
                        None => true,
                    };
                    if earlier {
                        first_failure = Some(f);
                    }
                }
            }
        }
    });
    if let Some((_, e)) = first_failure {
        return Err(e);
    }
    counts.finish(name, &mut stats);
    Ok(stats)
}

/// The end of the first record of `body` (the header), if a line end ends
/// it. Empty lines before it are skipped, as the CSV reader skips them.
fn cut_point_first(body: &[u8], delimiter: u8) -> Option<usize> {
    let start = body.iter().position(|&b| b != b'\n' && b != b'\r')?;
    let rest = &body[start..];
    let first_lf = rest.iter().position(|&b| b == b'\n')?;
    if !rest[..first_lf].contains(&b'"') {
        return Some(start + first_lf + 1);
    }
    // A quote in the header line: take the first line end outside quotes.
    (1..=rest.len())
        .filter(|&end| rest[end - 1] == b'\n')
        .find(|&end| cut_point(&rest[..end], delimiter) == Some(end))
        .map(|end| start + end)
}
/// The reader thread: cut the input into chunks at record ends.
#[allow(clippy::too_many_arguments)]
fn cut_chunks<R: Read>(
    name: &str,
    mut reader: R,
    start: Vec<u8>,
    first_line: u64,
    delimiter: u8,
    chunk_bytes: usize,
    out: &SyncSender<Chunk>,
    stop: &AtomicBool,
    buffers: &Pool<u8>,
) -> Result<(), Failure> {
    let mut buf = start;
    let mut line = first_line;
    let mut eof = false;
    // How much to hold before looking for a cut: a chunk, doubled each time
    // no record end turns up, so that a long record costs linear, not
    // quadratic, scanning.
    let mut target = chunk_bytes;
    while !eof && !stop.load(Ordering::Relaxed) {
        target = target.max(buf.len() + 1);
        let want = target - buf.len();
        // Room for the whole chunk at once: grown by read_to_end's doubling,
        // each chunk was copied several times over on its way to full size.
        buf.reserve_exact(want);
        // read_to_end grows the buffer as bytes come, without zero-filling
        // ahead, and retries interrupted reads.
        match (&mut reader).take(want as u64).read_to_end(&mut buf) {
            Ok(n) => eof = n < want,
            Err(source) => {
                let at = line + count_line_ends(&buf);
                return Err((
                    at,
                    IngestError::Io {
                        file: name.to_string(),
                        line: at,
                        source,
                    },
                ));
            }
        }
        let cut = if eof {
            Some(buf.len())
        } else {
            cut_point(&buf, delimiter)
        };
        match cut {
            Some(0) => {}
            Some(cut) => {
                target = chunk_bytes;
                // The bytes after the cut start the next chunk, in a buffer
                // a worker has finished with when there is one.
                let mut rest = buffers.take();
                rest.extend_from_slice(&buf[cut..]);
                buf.truncate(cut);
                let lines = count_line_ends(&buf);
                let chunk = Chunk {
                    bytes: std::mem::replace(&mut buf, rest),
                    first_line: line,
                };
                line += lines;
                if out.send(chunk).is_err() {
                    return Ok(());
                }
            }
            None => {
                // No record end yet: fail, as the one-thread reader does, only
                // when one physical line is too long (a quoted field may run
                // over many lines).
                let run_start = memchr::memrchr2(b'\n', b'\r', &buf).map_or(0, |i| i + 1);
                target = buf.len().saturating_mul(2);
                if (buf.len() - run_start) as u64 > MAX_LINE_BYTES {
                    let at = line + count_line_ends(&buf[..run_start]);
                    return Err((
                        at,
                        IngestError::LineTooLong {
                            file: name.to_string(),
                            line: at,
                            limit: MAX_LINE_BYTES,
                        },
                    ));
                }
            }
        }
    }
    Ok(())
}

/// Rows per call of the fold when the input is read on one thread after all
/// (a header that does not end in the first block read).
const ONE_THREAD_BATCH_ROWS: usize = 1024;

/// A worker: parse chunks until there are none.
fn work<T, W, F>(
    name: &str,
    chunks: &Mutex<Receiver<Chunk>>,
    out: &SyncSender<Result<Piece<T>, Failure>>,
    parser: &mut RowParser<'_>,
    fold: &F,
    stop: &AtomicBool,
    buffers: &Pool<u8>,
) where
    W: Default,
    F: Fn(&mut [FleetRow], &mut W) -> T,
{
    // A chunk's rows are all parsed before any is folded: parsing and the
    // fold (the state of charge) are each more code than the instruction
    // cache holds with the other, and row by row each evicted the other's;
    // phase by phase the misses fell fourfold (cachegrind, 200,000 rows).
    let mut rows = RowBatch::default();
    let mut scratch = W::default();
    // One CSV parser for all the chunks, reset for each.
    let mut core = primed_core(parser.delimiter);
    loop {
        let next = match chunks.lock() {
            Ok(rx) => rx.recv(),
            Err(_) => return,
        };
        let Ok(chunk) = next else { return };
        if stop.load(Ordering::Relaxed) {
            continue;
        }
        let (mut rejects, mut counts) = (Vec::new(), RecordCounts::default());
        let mut rdr = RecordReader::over(chunk.bytes, parser.delimiter, primed(core));
        let result = read_records(
            name,
            &mut rdr,
            parser,
            chunk.first_line - 1,
            &mut counts,
            &mut rows,
            &mut |r| rejects.push(r),
        );
        let (used, bytes) = rdr.into_parts();
        core = used;
        let sent = match result {
            Ok(()) => out.send(Ok(Piece {
                folded: fold(rows.rows_mut(), &mut scratch),
                rejects,
                counts,
                bytes: bytes.len() as u64,
            })),
            Err(e) => out.send(Err((chunk.first_line, e))),
        };
        rows.reset();
        buffers.put(bytes);
        if sent.is_err() {
            return;
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn cuts_after_the_last_record_end_outside_quotes() {
        assert_eq!(cut_point(b"a,b\nc,d\ne", b','), Some(8));
        assert_eq!(cut_point(b"a,b", b','), None);
        // A line end inside a quoted field is not a record end.
        assert_eq!(cut_point(b"a,\"x\ny\"\nb,\"p\nq", b','), Some(8));
        // An escaped quote keeps the field open; a quote inside an unquoted
        // field is a plain character (the csv crate's rules).
        assert_eq!(cut_point(b"a,\"x\"\"\ny\"\nz", b','), Some(10));
        assert_eq!(cut_point(b"a,x\"y\nb", b','), Some(6));
        assert_eq!(cut_point(b"a;\"1,2\"\nb", b';'), Some(8));
        // Old Mac line ends, when there is no \n at all.
        assert_eq!(cut_point(b"a,b\rc,d\re", b','), Some(8));
    }

    #[test]
    fn the_header_ends_at_its_first_line_end_outside_quotes() {
        assert_eq!(cut_point_first(b"unit_id,volts\n1,2\n", b','), Some(14));
        assert_eq!(
            cut_point_first(b"\"unit\nid\",volts\n1,2\n", b','),
            Some(16)
        );
        assert_eq!(cut_point_first(b"unit_id,volts", b','), None);
        // Empty lines before the header are skipped, as the CSV reader does.
        assert_eq!(cut_point_first(b"\n\r\nunit_id\n1\n", b','), Some(11));
        assert_eq!(cut_point_first(b"\n\n", b','), None);
    }
}
