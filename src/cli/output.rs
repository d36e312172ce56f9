//! Where output goes: standard output (a broken pipe is not an error) or a file
//! written whole or not at all (temporary file in the same folder, then rename).

use super::CliError;
use std::io::Write;
use std::path::{Path, PathBuf};

/// Write `bytes` to `path` (or stdout for `None` or `-`), atomically for files.
/// Refuses to overwrite any of `inputs`.
pub fn emit(path: Option<&Path>, bytes: &[u8], inputs: &[PathBuf]) -> Result<(), CliError> {
    emit_with(path, inputs, &mut |w| w.write_all(bytes))
}

/// [`emit`] for output produced piece by piece: `write` is given a buffered
/// writer to standard output or to the temporary file.
pub fn emit_with(
    path: Option<&Path>,
    inputs: &[PathBuf],
    write: &mut dyn FnMut(&mut dyn Write) -> std::io::Result<()>,
) -> Result<(), CliError> {
    match path {
        None => stdout(write),
        Some(p) if p == Path::new("-") => stdout(write),
        Some(p) => write_atomic_with(p, inputs, write),
    }
}

fn stdout(write: &mut dyn FnMut(&mut dyn Write) -> std::io::Result<()>) -> Result<(), CliError> {
    let mut out = std::io::BufWriter::with_capacity(64 * 1024, std::io::stdout().lock());
    match write(&mut out).and_then(|_| out.flush()) {
        Ok(()) => Ok(()),
        // `restvolt fleet big.csv | head`: the reader left; stop quietly.
        Err(e) if e.kind() == std::io::ErrorKind::BrokenPipe => Err(CliError {
            code: 0,
            message: String::new(),
        }),
        Err(e) => Err(CliError::fail(format!("writing to standard output: {e}"))),
    }
}

fn same_file(a: &Path, b: &Path) -> bool {
    match (a.canonicalize(), b.canonicalize()) {
        (Ok(x), Ok(y)) => x == y,
        _ => false,
    }
}

/// Write `bytes` to `path` whole or not at all; refuses to overwrite any of `inputs`.
pub fn write_atomic(path: &Path, bytes: &[u8], inputs: &[PathBuf]) -> Result<(), CliError> {
    write_atomic_with(path, inputs, &mut |w| w.write_all(bytes))
}

fn write_atomic_with(
    path: &Path,
    inputs: &[PathBuf],
    write: &mut dyn FnMut(&mut dyn Write) -> std::io::Result<()>,
) -> Result<(), CliError> {
    if inputs.iter().any(|i| same_file(i, path)) {
        return Err(CliError::usage(format!(
            "refusing to write the report over the input file {}",
            path.display()
        )));
    }
    let fail = |e: std::io::Error| CliError::fail(format!("writing {}: {e}", path.display()));
    // A device or a pipe (`-o /dev/null`, `-o /dev/stdout`, a FIFO) is
    // written through: renaming a file over it would replace the device
    // node itself with a regular file, for every program on the machine.
    if std::fs::metadata(path).is_ok_and(|m| !m.is_file() && !m.is_dir()) {
        let result = (|| {
            let f = std::fs::OpenOptions::new().write(true).open(path)?;
            let mut w = std::io::BufWriter::with_capacity(64 * 1024, f);
            write(&mut w)?;
            w.flush()
        })();
        return result.map_err(fail);
    }
    let dir = match path.parent() {
        Some(d) if !d.as_os_str().is_empty() => d.to_path_buf(),
        _ => PathBuf::from("."),
    };
    let name = path
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_else(|| "output".into());
    let tmp = dir.join(format!(".{name}.restvolt-{}.tmp", std::process::id()));
    let result = (|| {
        let f = std::fs::File::create(&tmp)?;
        let mut w = std::io::BufWriter::with_capacity(64 * 1024, f);
        write(&mut w)?;
        let f = w.into_inner().map_err(|e| e.into_error())?;
        f.sync_all()?;
        std::fs::rename(&tmp, path)
    })();
    if let Err(e) = result {
        let _ = std::fs::remove_file(&tmp);
        return Err(fail(e));
    }
    Ok(())
}

/// Width text reports are wrapped to when standard output is not a terminal
/// (a file, a pipe, a test): the classic terminal width.
pub const TEXT_COLUMNS: usize = 80;

/// Narrowest terminal width wrapped to; a narrower report reads worse than
/// lines the terminal folds itself.
pub const MIN_TEXT_COLUMNS: usize = 20;

/// Columns to wrap text on standard output to: the terminal's width when
/// stdout is a terminal (at least [`MIN_TEXT_COLUMNS`]), else [`TEXT_COLUMNS`].
pub fn stdout_columns() -> usize {
    use std::io::IsTerminal;
    let out = std::io::stdout();
    if !out.is_terminal() {
        return TEXT_COLUMNS;
    }
    terminal_size::terminal_size_of(&out)
        .map(|(w, _)| usize::from(w.0).max(MIN_TEXT_COLUMNS))
        .unwrap_or(TEXT_COLUMNS)
}

/// Whether `word` after a number is its unit (`%`, `°C`, `h`, `min`, `mV`),
/// to be kept on the number's line: a short word, or one starting with a sign.
fn is_unit_after_number(word: &str) -> bool {
    let bare = word.trim_end_matches([')', ',', ';', ':', '.']);
    bare.starts_with(['%', '°']) || (1..=3).contains(&bare.chars().count())
}

/// `lead` then `text` wrapped at spaces to lines of at most `width_columns`
/// characters, continuation lines indented by `indent` spaces (under the text
/// after a bullet such as `"  - "`), each line ending in `\n`. Runs of white
/// space become one space. A number keeps a short word after it (its unit:
/// `50 %`, `3–5 min`) on its line. A word longer than the room is kept whole on
/// its own line rather than split (a URL or file name must stay copyable).
/// Width is counted in characters: the report's text has no double-width ones.
pub fn wrap_hanging(lead: &str, text: &str, indent: usize, width_columns: usize) -> String {
    let mut pieces: Vec<String> = Vec::new();
    for word in text.split_whitespace() {
        match pieces.last_mut() {
            Some(last)
                if last.ends_with(|c: char| c.is_ascii_digit()) && is_unit_after_number(word) =>
            {
                last.push(' ');
                last.push_str(word);
            }
            _ => pieces.push(word.to_string()),
        }
    }
    let mut out = String::new();
    let mut line = lead.to_string();
    let mut used = lead.chars().count();
    let mut has_word = false;
    for word in &pieces {
        let len = word.chars().count();
        if has_word && used + 1 + len > width_columns {
            out.push_str(line.trim_end());
            out.push('\n');
            line = " ".repeat(indent);
            used = indent;
            has_word = false;
        }
        if has_word {
            line.push(' ');
            used += 1;
        }
        line.push_str(word);
        used += len;
        has_word = true;
    }
    out.push_str(line.trim_end());
    out.push('\n');
    out
}

/// `text` with each line longer than `width_columns` wrapped at spaces; lines
/// that fit are kept as they are, column spacing and all. A line that starts
/// with a label padded by two or more spaces (`Verdict         not yet...`)
/// continues under its value; any other continues two spaces in from its own
/// indent. For reports made of lines (`settle`, `calibrate`) whose free-text
/// lines can run long.
pub fn wrap_long_lines(text: &str, width_columns: usize) -> String {
    let mut out = String::with_capacity(text.len());
    for line in text.lines() {
        if line.chars().count() <= width_columns {
            out.push_str(line);
            out.push('\n');
            continue;
        }
        let body = line.trim_start();
        let indent_bytes = line.len() - body.len();
        let lead_bytes = match body.find("  ") {
            Some(gap) if gap > 0 => {
                let after = &body[gap..];
                indent_bytes + gap + (after.len() - after.trim_start().len())
            }
            _ => indent_bytes,
        };
        let (lead, rest) = line.split_at(lead_bytes);
        let lead_columns = lead.chars().count();
        let hang = if lead_bytes > indent_bytes {
            lead_columns
        } else {
            lead_columns + 2
        };
        out.push_str(&wrap_hanging(lead, rest, hang, width_columns));
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    fn widths(s: &str) -> Vec<usize> {
        s.lines().map(|l| l.chars().count()).collect()
    }

    #[test]
    fn only_lines_too_long_are_wrapped_under_their_own_indent() {
        let text = "Curve   a   b\n  flag x: one two three four five six\nshort\n";
        let w = wrap_long_lines(text, 16);
        assert_eq!(
            w,
            "Curve   a   b\n  flag x: one\n    two three\n    four five\n    six\nshort\n"
        );
        assert!(widths(&w).iter().all(|&n| n <= 16), "{w}");
        // Nothing is lost: the words are the same.
        assert_eq!(
            w.split_whitespace().collect::<Vec<_>>(),
            text.split_whitespace().collect::<Vec<_>>()
        );
    }

    #[test]
    fn a_padded_label_keeps_its_padding_and_its_value_continues_under_it() {
        let w = wrap_long_lines("Verdict   not yet settled today\n", 23);
        assert_eq!(w, "Verdict   not yet\n          settled today\n");
    }

    #[test]
    fn short_text_stays_on_one_line() {
        assert_eq!(wrap_hanging("  - ", "a b  c", 4, 80), "  - a b c\n");
        assert_eq!(wrap_hanging("Flags", "", 2, 80), "Flags\n");
    }

    #[test]
    fn long_text_breaks_at_spaces_under_the_bullet() {
        let text = "one two three four five six seven eight nine ten";
        let w = wrap_hanging("  ! ", text, 4, 20);
        assert_eq!(
            w,
            "  ! one two three\n    four five six\n    seven eight nine\n    ten\n"
        );
        assert!(widths(&w).iter().all(|&n| n <= 20), "{w}");
        let words: Vec<&str> = w.split_whitespace().skip(1).collect();
        assert_eq!(words, text.split_whitespace().collect::<Vec<_>>());
    }

    #[test]
    fn a_line_of_exactly_the_width_is_kept() {
        // "ab cd" is 5 characters: fits 5, breaks at 4.
        assert_eq!(wrap_hanging("", "ab cd", 0, 5), "ab cd\n");
        assert_eq!(wrap_hanging("", "ab cd", 0, 4), "ab\ncd\n");
    }

    #[test]
    fn characters_not_bytes_are_counted() {
        // "–" and "°" are one column, three and two bytes in UTF-8.
        // "3–5 °C 3–5 °C" is 13 characters and 19 bytes.
        assert_eq!(wrap_hanging("", "3–5 °C 3–5 °C", 0, 13), "3–5 °C 3–5 °C\n");
        assert_eq!(wrap_hanging("", "3–5 °C 3–5 °C", 0, 12), "3–5 °C\n3–5 °C\n");
    }

    #[test]
    fn a_number_keeps_its_unit() {
        // "below 50" fits 14 columns, but "%" stays with its number.
        assert_eq!(
            wrap_hanging("", "48 % is below 50 %", 0, 14),
            "48 % is below\n50 %\n"
        );
        assert_eq!(
            wrap_hanging("", "after 3–5 min, then", 0, 9),
            "after\n3–5 min,\nthen\n"
        );
        // A longer word after a number is no unit: the line may break there.
        assert_eq!(
            wrap_hanging("", "Article 320 risk", 0, 11),
            "Article 320\nrisk\n"
        );
    }

    #[test]
    fn an_overlong_word_is_kept_whole() {
        let long = "x".repeat(30);
        let w = wrap_hanging("  - ", &format!("see {long} now"), 4, 20);
        assert_eq!(w, format!("  - see\n    {long}\n    now\n"));
    }
}
