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
    let dir = match path.parent() {
        Some(d) if !d.as_os_str().is_empty() => d.to_path_buf(),
        _ => PathBuf::from("."),
    };
    let name = path
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_else(|| "output".into());
    let tmp = dir.join(format!(".{name}.restvolt-{}.tmp", std::process::id()));
    let fail = |e: std::io::Error| CliError::fail(format!("writing {}: {e}", path.display()));
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
