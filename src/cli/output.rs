//! Where output goes: standard output (a broken pipe is not an error) or a file
//! written whole or not at all (temporary file in the same folder, then rename).

use super::CliError;
use std::io::Write;
use std::path::{Path, PathBuf};

/// Write `bytes` to `path` (or stdout for `None` or `-`), atomically for files.
/// Refuses to overwrite any of `inputs`.
pub fn emit(path: Option<&Path>, bytes: &[u8], inputs: &[PathBuf]) -> Result<(), CliError> {
    match path {
        None => stdout(bytes),
        Some(p) if p == Path::new("-") => stdout(bytes),
        Some(p) => write_atomic(p, bytes, inputs),
    }
}

fn stdout(bytes: &[u8]) -> Result<(), CliError> {
    let mut out = std::io::stdout().lock();
    match out.write_all(bytes).and_then(|_| out.flush()) {
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

/// Write a file whole or not at all.
pub fn write_atomic(path: &Path, bytes: &[u8], inputs: &[PathBuf]) -> Result<(), CliError> {
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
        let mut f = std::fs::File::create(&tmp)?;
        f.write_all(bytes)?;
        f.sync_all()?;
        std::fs::rename(&tmp, path)
    })();
    if let Err(e) = result {
        let _ = std::fs::remove_file(&tmp);
        return Err(fail(e));
    }
    Ok(())
}
