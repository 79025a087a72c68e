//! Running a batch over many input files with bounded memory.
//!
//! In: input paths, a plate map, a [`Models`] cache and [`BatchOptions`].
//! Out: a stream of events, in input order, handed to the caller's sink:
//! each plate's [`PlateResult`] (with whatever the caller's `render`
//! produced for it, in parallel) and a summary of each input file.
//!
//! One thread reads the inputs in turn, hashing them (SHA-256) as they
//! stream in, and cuts them into plates ([`crate::input::plates`]). Plates
//! are parsed, fitted and rendered in parallel (rayon), a window of a few
//! plates per thread at a time, and handed to the sink in input order. Only
//! that window and a short queue are in memory, whatever the number of
//! plates. Each plate is processed by one thread from start to end, so the
//! results do not depend on the number of threads.

use super::{BatchOptions, Models, PlateResult, process_plate};
use crate::input::plate::Reading;
use crate::input::platemap::PlateMap;
use crate::input::plates::{PlateStream, RawPlate};
use rayon::prelude::*;
use sha2::{Digest, Sha256};
use std::collections::HashMap;
use std::io::Read;
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicU64, Ordering};
use std::sync::mpsc;

/// Plates in flight per worker thread.
const WINDOW_PER_THREAD: usize = 4;

/// What happened to one input file.
#[derive(Debug, Clone, serde::Serialize)]
pub struct InputSummary {
    /// The path as given.
    pub path: String,
    /// Detected layout.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub layout: Option<&'static str>,
    /// Bytes read.
    pub bytes: u64,
    /// SHA-256 of the whole file, hex (absent when it could not be read to
    /// the end).
    #[serde(skip_serializing_if = "Option::is_none")]
    pub sha256: Option<String>,
    /// Plates found.
    pub plates: usize,
    /// Why the file (or its rest) could not be read.
    #[serde(skip_serializing_if = "Option::is_none")]
    pub error: Option<String>,
}

/// An event for the sink, in input order.
#[derive(Debug)]
pub enum Event<R> {
    /// A plate is done.
    Plate(Box<PlateResult>, R),
    /// An input file is done (after all its plates).
    Input(InputSummary),
}

/// The inputs and settings of a run.
pub struct RunSpec<'a> {
    /// Input files; `-` is standard input.
    pub inputs: &'a [PathBuf],
    /// The plate map, if any.
    pub map: Option<&'a PlateMap>,
    /// What the input numbers are, and the user's overflow words.
    pub reading: Reading,
    /// Batch options.
    pub options: &'a BatchOptions,
    /// Bytes read so far, for a progress display.
    pub bytes_read: &'a AtomicU64,
}

enum Message {
    Plate(usize, RawPlate),
    Input(InputSummary),
}

/// A reader that hashes and counts what passes through it.
struct Tap<'a, R> {
    inner: R,
    hasher: Sha256,
    bytes: u64,
    counter: &'a AtomicU64,
}

impl<R: Read> Read for Tap<'_, R> {
    fn read(&mut self, buf: &mut [u8]) -> std::io::Result<usize> {
        let k = self.inner.read(buf)?;
        self.hasher.update(&buf[..k]);
        self.bytes += k as u64;
        self.counter.fetch_add(k as u64, Ordering::Relaxed);
        Ok(k)
    }
}

fn hex(bytes: &[u8]) -> String {
    bytes.iter().map(|b| format!("{b:02x}")).collect()
}

/// The name given to plates of a file that does not name them.
pub fn stem(path: &Path) -> String {
    if path.as_os_str() == "-" {
        return "stdin".into();
    }
    path.file_stem()
        .map(|s| s.to_string_lossy().into_owned())
        .filter(|s| !s.is_empty())
        .unwrap_or_else(|| "plate".into())
}

/// Shown name of an input.
pub fn shown(path: &Path) -> String {
    if path.as_os_str() == "-" {
        "standard input".into()
    } else {
        path.display().to_string()
    }
}

fn read_input(
    index: usize,
    path: &Path,
    reading: &Reading,
    counter: &AtomicU64,
    tx: &mpsc::SyncSender<Message>,
) -> InputSummary {
    let mut summary = InputSummary {
        path: shown(path),
        layout: None,
        bytes: 0,
        sha256: None,
        plates: 0,
        error: None,
    };
    let reader: Box<dyn Read + Send> = if path.as_os_str() == "-" {
        Box::new(std::io::stdin())
    } else {
        match std::fs::File::open(path) {
            Ok(f) => Box::new(f),
            Err(e) => {
                summary.error = Some(e.to_string());
                return summary;
            }
        }
    };
    let tap = Tap {
        inner: reader,
        hasher: Sha256::new(),
        bytes: 0,
        counter,
    };
    let mut stream = match PlateStream::open(tap, &stem(path), reading) {
        Ok(s) => s,
        Err(e) => {
            summary.error = Some(e.to_string());
            return summary;
        }
    };
    summary.layout = Some(stream.layout().name());
    let complete = loop {
        match stream.next_plate() {
            Ok(Some(p)) => {
                summary.plates += 1;
                if tx.send(Message::Plate(index, p)).is_err() {
                    break false;
                }
            }
            Ok(None) => break true,
            Err(e) => {
                summary.error = Some(format!(
                    "reading stopped after {} plate(s): {e}",
                    summary.plates
                ));
                break false;
            }
        }
    };
    let tap = stream.into_inner();
    summary.bytes = tap.bytes;
    if complete {
        summary.sha256 = Some(hex(&tap.hasher.finalize()));
    }
    summary
}

/// Run a batch. `render` runs in the worker threads on each plate's result;
/// `sink` receives the events in input order on the calling thread. An
/// error from the sink (writing outputs) stops the run and is returned.
pub fn run<R, F, S>(spec: &RunSpec, models: &Models, render: F, mut sink: S) -> std::io::Result<()>
where
    R: Send,
    F: Fn(&mut PlateResult) -> R + Sync,
    S: FnMut(Event<R>) -> std::io::Result<()> + Send,
{
    let window = WINDOW_PER_THREAD * rayon::current_num_threads().max(1);
    let (tx, rx) = mpsc::sync_channel::<Message>(window);
    let shown_inputs: Vec<String> = spec.inputs.iter().map(|p| shown(p)).collect();
    std::thread::scope(|scope| {
        let reader = scope.spawn(move || {
            for (i, path) in spec.inputs.iter().enumerate() {
                let s = read_input(i, path, &spec.reading, spec.bytes_read, &tx);
                if tx.send(Message::Input(s)).is_err() {
                    return;
                }
            }
        });
        let process = |(input, raw): (usize, RawPlate)| {
            let input_name = &shown_inputs[input];
            let name = raw.name.clone();
            let entries = spec.map.and_then(|m| m.for_plate(&name));
            let mut result = match raw.parse(&spec.reading) {
                Ok(spectra) => {
                    let mut r =
                        process_plate(spectra, input_name, entries.as_ref(), models, spec.options);
                    if spec.map.is_some() && entries.is_none() {
                        r.warnings.insert(
                            0,
                            format!(
                                "plate '{name}' has no entries in the plate map: every well treated as a sample named after its well, no blank subtracted"
                            ),
                        );
                    }
                    r
                }
                Err(e) => PlateResult::failed(&name, input_name, e.to_string()),
            };
            let r = render(&mut result);
            (Box::new(result), r)
        };
        let mut seen: HashMap<String, String> = HashMap::new();
        let mut pending: Vec<(usize, RawPlate)> = Vec::with_capacity(window);
        // Plates processed but not yet handed to the sink: the sink writes
        // one window while the workers process the next.
        let mut done: Vec<(Box<PlateResult>, R)> = Vec::new();
        let step = |pending: &mut Vec<(usize, RawPlate)>,
                    done: &mut Vec<(Box<PlateResult>, R)>,
                    sink: &mut S|
         -> std::io::Result<()> {
            let ready = std::mem::take(done);
            let work = std::mem::take(pending);
            let (written, next) = rayon::join(
                || -> std::io::Result<()> {
                    for (p, r) in ready {
                        sink(Event::Plate(p, r))?;
                    }
                    Ok(())
                },
                || work.into_par_iter().map(process).collect::<Vec<_>>(),
            );
            *done = next;
            written
        };
        let outcome = (|| -> std::io::Result<()> {
            for message in rx.iter() {
                match message {
                    Message::Plate(input, raw) => {
                        let raw = match seen.get(&raw.name) {
                            Some(first) => {
                                let e = crate::error::Error::structure(
                                    raw.first_line,
                                    format!(
                                        "a plate named '{}' was already read from {first}: plate names must be unique in a run (this one is skipped)",
                                        raw.name
                                    ),
                                );
                                RawPlate::failed(raw.name.clone(), raw.first_line, e)
                            }
                            None => {
                                seen.insert(raw.name.clone(), shown_inputs[input].clone());
                                raw
                            }
                        };
                        pending.push((input, raw));
                        if pending.len() >= window {
                            step(&mut pending, &mut done, &mut sink)?;
                        }
                    }
                    Message::Input(s) => {
                        // Everything before the input's end goes out first.
                        step(&mut pending, &mut done, &mut sink)?;
                        step(&mut pending, &mut done, &mut sink)?;
                        sink(Event::Input(s))?;
                    }
                }
            }
            step(&mut pending, &mut done, &mut sink)?;
            step(&mut pending, &mut done, &mut sink)
        })();
        // On a sink error, stop the reader by dropping the receiver.
        drop(rx);
        let _ = reader.join();
        outcome
    })
}
