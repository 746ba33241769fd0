//! Writing results to stdout: tables for people, JSON for scripts; a closed pipe is not an error.

use crate::failure::Failure;
use serde::Serialize;
use std::io::Write;

/// Writes text to stdout.
pub fn print_text(text: &str) -> Result<(), Failure> {
    let mut out = std::io::stdout().lock();
    out.write_all(text.as_bytes())?;
    if !text.ends_with('\n') {
        out.write_all(b"\n")?;
    }
    out.flush()?;
    Ok(())
}

/// Writes a value as pretty JSON to stdout.
pub fn print_json<T: Serialize>(value: &T) -> Result<(), Failure> {
    let text = serde_json::to_string_pretty(value)
        .map_err(|e| Failure::new(format!("cannot format JSON: {e}"), "report this as a bug"))?;
    print_text(&text)
}

/// Prints JSON when asked for, otherwise the text.
pub fn print<T: Serialize>(
    json: bool,
    value: &T,
    text: impl FnOnce() -> String,
) -> Result<(), Failure> {
    if json {
        print_json(value)
    } else {
        print_text(&text())
    }
}
