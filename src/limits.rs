//! Limits on what a run reads, so no input can exhaust memory or hang it.
//!
//! Every text reader caps the length of a line: a spectrum file's longest
//! honest line is a header with a few hundred thousand sample names, far
//! below [`MAX_LINE_BYTES`] (64 MiB); a file with no line breaks at all
//! (`/dev/zero`, a binary file) fails at that point with the line number,
//! instead of growing without bound. Component files in a library are read
//! only when they are regular files no larger than [`MAX_COMPONENT_BYTES`].
//! In: a reader or path. Out: the bytes, or a located error.

use crate::error::{Error, Result};
use std::io::Read;
use std::path::Path;

/// The longest line any reader accepts, in bytes (64 MiB).
pub const MAX_LINE_BYTES: usize = 64 << 20;

/// The largest component file a library reads, in bytes (16 MiB): a
/// component of 100,000 wavelengths in TOML is about 3 MB.
pub const MAX_COMPONENT_BYTES: u64 = 16 << 20;

/// Counts lines and the length of the current one across chunks of input.
#[derive(Debug, Clone)]
pub struct LineCap {
    limit: usize,
    /// Line breaks seen so far.
    breaks: usize,
    /// Bytes since the last line break.
    current: usize,
}

impl LineCap {
    /// A cap of `limit` bytes per line.
    pub fn new(limit: usize) -> Self {
        LineCap {
            limit,
            breaks: 0,
            current: 0,
        }
    }

    /// Account for the next chunk of input; an error once a line is longer
    /// than the limit, naming its 1-based number.
    pub fn feed(&mut self, chunk: &[u8]) -> Result<()> {
        match memchr::memrchr(b'\n', chunk) {
            Some(last) => {
                // Lines ended inside this chunk: the first one continues the
                // current line, the others start and end here.
                let mut start = 0;
                for nl in memchr::memchr_iter(b'\n', chunk) {
                    let len = if start == 0 {
                        self.current + nl
                    } else {
                        nl - start
                    };
                    self.check(len)?;
                    self.breaks += 1;
                    start = nl + 1;
                }
                self.current = chunk.len() - last - 1;
            }
            None => self.current += chunk.len(),
        }
        self.check(self.current)
    }

    fn check(&self, len: usize) -> Result<()> {
        if len > self.limit {
            return Err(Error::LineTooLong {
                line: self.breaks + 1,
                limit_mib: self.limit.div_ceil(1 << 20),
            });
        }
        Ok(())
    }
}

/// Read everything from `r`, failing as soon as a line passes `limit`
/// bytes. `shown` names the source in read errors.
pub fn read_with_cap(mut r: impl Read, shown: &str, limit: usize) -> Result<Vec<u8>> {
    let mut bytes = Vec::new();
    let mut cap = LineCap::new(limit);
    let mut buf = vec![0u8; 1 << 16];
    loop {
        let n = match r.read(&mut buf) {
            Ok(0) => return Ok(bytes),
            Ok(n) => n,
            Err(e) if e.kind() == std::io::ErrorKind::Interrupted => continue,
            Err(e) => return Err(Error::io(shown, e)),
        };
        cap.feed(&buf[..n])?;
        bytes.extend_from_slice(&buf[..n]);
    }
}

/// A reader that fails (with [`Error::LineTooLong`] inside an
/// [`std::io::ErrorKind::InvalidData`] error) once a line passes the cap,
/// for readers that stream their input rather than read it whole.
pub struct Capped<R> {
    inner: R,
    cap: LineCap,
}

impl<R: Read> Capped<R> {
    /// Wrap `inner` with a cap of [`MAX_LINE_BYTES`] per line.
    pub fn new(inner: R) -> Self {
        Self::with_limit(inner, MAX_LINE_BYTES)
    }

    /// Wrap `inner` with a cap of `limit` bytes per line.
    pub fn with_limit(inner: R, limit: usize) -> Self {
        Capped {
            inner,
            cap: LineCap::new(limit),
        }
    }
}

impl<R: Read> Read for Capped<R> {
    fn read(&mut self, buf: &mut [u8]) -> std::io::Result<usize> {
        let n = self.inner.read(buf)?;
        self.cap
            .feed(&buf[..n])
            .map_err(|e| std::io::Error::new(std::io::ErrorKind::InvalidData, e))?;
        Ok(n)
    }
}

/// Read a text input (a file, or standard input for `-`) with the line cap.
pub fn read_text(path: &Path) -> Result<Vec<u8>> {
    if path.as_os_str() == "-" {
        return read_with_cap(std::io::stdin().lock(), "standard input", MAX_LINE_BYTES);
    }
    let shown = path.display().to_string();
    let file = std::fs::File::open(path).map_err(|e| Error::io(shown.clone(), e))?;
    read_with_cap(file, &shown, MAX_LINE_BYTES)
}

/// Read a library's component file: a regular file (never a pipe, device
/// or folder, which could hang or never end) of at most `max_bytes`.
pub fn read_regular(path: &Path, max_bytes: u64) -> Result<Vec<u8>> {
    let shown = path.display().to_string();
    let meta = std::fs::metadata(path).map_err(|e| Error::io(shown.clone(), e))?;
    if !meta.is_file() {
        return Err(Error::Invalid(format!(
            "{shown}: not a regular file (a pipe, device or folder): expected a component file"
        )));
    }
    let file = std::fs::File::open(path).map_err(|e| Error::io(shown.clone(), e))?;
    let mut bytes = Vec::new();
    file.take(max_bytes + 1)
        .read_to_end(&mut bytes)
        .map_err(|e| Error::io(shown.clone(), e))?;
    if bytes.len() as u64 > max_bytes {
        return Err(Error::Invalid(format!(
            "{shown}: larger than {} MiB: expected a component file",
            max_bytes.div_ceil(1 << 20)
        )));
    }
    Ok(bytes)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_line_past_the_cap_is_an_error_with_its_number() {
        let text = b"a,b\n1,2\n3456789\n";
        // Line 3 has 7 bytes: a cap of 6 stops there, a cap of 7 passes.
        let e = read_with_cap(&text[..], "t", 6).unwrap_err().to_string();
        assert!(e.starts_with("line 3 is longer than"), "{e}");
        assert_eq!(read_with_cap(&text[..], "t", 7).unwrap(), text);
    }

    #[test]
    fn lines_split_across_chunks_are_counted_whole() {
        let mut cap = LineCap::new(5);
        cap.feed(b"abc").unwrap();
        cap.feed(b"de\nab").unwrap();
        let e = cap.feed(b"cdef").unwrap_err().to_string();
        assert!(e.starts_with("line 2 "), "{e}");
        let mut cap = LineCap::new(5);
        cap.feed(b"abc").unwrap();
        assert!(cap.feed(b"def\n").is_err(), "6 bytes before the break");
    }

    #[test]
    fn an_endless_stream_without_breaks_stops_at_the_cap() {
        // /dev/zero stands for any input without line breaks.
        let zeros = std::io::repeat(0).take(10 << 20);
        let e = read_with_cap(zeros, "zeros", 1 << 20)
            .unwrap_err()
            .to_string();
        assert_eq!(
            e,
            "line 1 is longer than 1 MiB: expected a text file with line breaks"
        );
    }

    #[test]
    fn a_capped_reader_stops_an_endless_stream() {
        let zeros = std::io::repeat(b'x').take(4 << 20);
        let mut capped = Capped::with_limit(zeros, 1 << 20);
        let mut sink = Vec::new();
        let e = capped.read_to_end(&mut sink).unwrap_err();
        assert_eq!(e.kind(), std::io::ErrorKind::InvalidData);
        assert!(
            e.to_string().starts_with("line 1 is longer than 1 MiB"),
            "{e}"
        );
    }

    #[cfg(unix)]
    #[test]
    fn only_regular_files_of_bounded_size_are_read() {
        let e = read_regular(Path::new("/dev/zero"), 100)
            .unwrap_err()
            .to_string();
        assert!(e.contains("not a regular file"), "{e}");
        let dir = std::env::temp_dir().join(format!("unblend-limits-{}", std::process::id()));
        std::fs::create_dir_all(&dir).unwrap();
        let big = dir.join("big.toml");
        std::fs::write(&big, vec![b'#'; 101]).unwrap();
        let e = read_regular(&big, 100).unwrap_err().to_string();
        assert!(e.contains("larger than"), "{e}");
        assert_eq!(read_regular(&big, 101).unwrap().len(), 101);
        std::fs::remove_dir_all(&dir).unwrap();
    }
}
