//! The one way the command line writes: standard output through [`Out`]
//! (a closed pipe ends the process quietly with the SIGPIPE status),
//! notes on standard error, and files created with their folders.

use std::fmt::Display;
use std::io::Write;
use std::path::Path;

/// Standard output and standard error for the commands.
#[derive(Debug, Default)]
pub struct Out;

impl Out {
    /// A line on standard output.
    pub fn line(&mut self, text: impl Display) {
        let mut o = std::io::stdout().lock();
        if writeln!(o, "{text}").is_err() {
            stdout_closed()
        }
    }

    /// Text on standard output as it is (it carries its own newlines).
    pub fn text(&mut self, text: impl Display) {
        let mut o = std::io::stdout().lock();
        if write!(o, "{text}").and_then(|()| o.flush()).is_err() {
            stdout_closed()
        }
    }

    /// A value as pretty JSON on standard output.
    ///
    /// # Errors
    /// When the value cannot be serialised.
    pub fn json<T: serde::Serialize>(&mut self, v: &T) -> Result<(), String> {
        let text = serde_json::to_string_pretty(v).map_err(|e| e.to_string())?;
        self.line(text);
        Ok(())
    }

    /// A note for the person at the terminal, on standard error, prefixed
    /// with the command's name.
    pub fn note(&mut self, command: &str, text: impl Display) {
        eprintln!("replay {command}: {text}");
    }
}

/// Standard output is gone: stop at once, with the SIGPIPE status (141, as
/// a shell reports a process ended by SIGPIPE).
fn stdout_closed() -> ! {
    std::process::exit(141)
}

/// Create a file for writing, and its folder when it does not exist.
///
/// # Errors
/// A message naming the path.
pub fn create(path: &Path) -> Result<std::io::BufWriter<std::fs::File>, String> {
    if let Some(dir) = path.parent()
        && !dir.as_os_str().is_empty()
    {
        std::fs::create_dir_all(dir).map_err(|e| format!("{}: {e}", dir.display()))?;
    }
    let f = std::fs::File::create(path).map_err(|e| format!("{}: {e}", path.display()))?;
    Ok(std::io::BufWriter::new(f))
}

/// Write `bytes` to a new file (folder created).
///
/// # Errors
/// A message naming the path.
pub fn write_file(path: &Path, bytes: &[u8]) -> Result<(), String> {
    let mut w = create(path)?;
    w.write_all(bytes)
        .and_then(|()| w.flush())
        .map_err(|e| format!("{}: {e}", path.display()))
}

/// Write a value as pretty JSON to a new file (folder created).
///
/// # Errors
/// A message naming the path.
pub fn write_json<T: serde::Serialize>(path: &Path, v: &T) -> Result<(), String> {
    let mut text = serde_json::to_string_pretty(v).map_err(|e| e.to_string())?;
    text.push('\n');
    write_file(path, text.as_bytes())
}

/// Flush a writer made by [`create`].
///
/// # Errors
/// A message naming the path.
pub fn finish<W: Write>(mut w: W, path: &Path) -> Result<(), String> {
    w.flush().map_err(|e| format!("{}: {e}", path.display()))
}
