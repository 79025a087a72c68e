//! Writing to standard output the way command-line tools do: a reader that
//! stops early (`unblend fit … | head`) closes the pipe, and the run ends
//! quietly with its own exit code; any other write error (a full disk,
//! `> /dev/full`) is a failure with exit 1. Nothing here panics, unlike
//! `print!`, which panics on either.

use super::Failure;
use std::io::{self, BufWriter, Write};

/// What a write error on standard output means for the run: nothing for a
/// closed pipe, a failure otherwise.
pub fn outcome(result: io::Result<()>) -> Result<(), Failure> {
    match result {
        Ok(()) => Ok(()),
        Err(e) if is_closed_pipe(&e) => Ok(()),
        Err(e) => Err(Failure::new(format!("standard output: {e}"))),
    }
}

/// Whether an error is, or wraps, a closed pipe (an encoder such as
/// serde_json may wrap the writer's error in its own).
pub fn is_closed_pipe(e: &io::Error) -> bool {
    if e.kind() == io::ErrorKind::BrokenPipe {
        return true;
    }
    let Some(inner) = e.get_ref() else {
        return false;
    };
    if let Some(io) = inner.downcast_ref::<io::Error>() {
        return is_closed_pipe(io);
    }
    inner
        .downcast_ref::<serde_json::Error>()
        .and_then(serde_json::Error::io_error_kind)
        == Some(io::ErrorKind::BrokenPipe)
}

/// Write to standard output through `fill` (buffered, 1 MiB), then flush.
/// The writer is `Send`, so `fill` may hand it to a writer thread.
pub fn write_with(
    fill: impl FnOnce(&mut (dyn Write + Send)) -> io::Result<()>,
) -> Result<(), Failure> {
    let mut w = BufWriter::with_capacity(1 << 20, io::stdout());
    let result = fill(&mut w).and_then(|()| w.flush());
    // A closed pipe stays closed: drop the unwritten rest quietly.
    let (_, _) = w.into_parts();
    outcome(result)
}

/// Write a finished text to standard output.
pub fn print(text: &str) -> Result<(), Failure> {
    write_with(|w| w.write_all(text.as_bytes()))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_closed_pipe_is_quiet_and_a_full_device_fails() {
        let closed = io::Error::from(io::ErrorKind::BrokenPipe);
        assert!(outcome(Err(closed)).is_ok());
        // The same wrapped the way `output::write_json` wraps serde's error.
        let wrapped = io::Error::other(serde_json::Error::io(io::ErrorKind::BrokenPipe.into()));
        assert!(outcome(Err(wrapped)).is_ok());
        // ENOSPC is what a write to /dev/full gives (Linux man page full(4)).
        let full = io::Error::from_raw_os_error(28);
        let f = outcome(Err(full)).unwrap_err();
        assert_eq!(f.code, super::super::exit::FAILED);
        assert!(f.message.starts_with("standard output: "), "{}", f.message);
    }
}
