//! Running a batch over many input files with bounded memory.
//!
//! In: inputs (each a name to show and a way to open a reader), a plate map, a [`Models`] cache and [`BatchOptions`].
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
use std::io::{self, Read};
use std::path::Path;
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

/// Opens an input's reader when the run reaches it.
type Opener = Box<dyn FnOnce() -> io::Result<Box<dyn Read + Send>> + Send>;

/// One input of a run: how messages name it, what its plates are called when
/// it does not name them, and how to open it. Readers are opened one at a
/// time, in order, so a run over many files holds one open at once.
pub struct Input {
    /// The name messages and the run log give it.
    pub shown: String,
    /// The name given to plates of an input that does not name them.
    pub stem: String,
    open: Opener,
}

impl Input {
    /// A file, opened when the run reaches it; plates it does not name are
    /// called after its file stem.
    pub fn file(path: &Path) -> Input {
        let owned = path.to_path_buf();
        Input {
            shown: path.display().to_string(),
            stem: stem(path),
            open: Box::new(move || {
                let f = std::fs::File::open(owned)?;
                Ok(Box::new(f) as Box<dyn Read + Send>)
            }),
        }
    }

    /// An already open reader (standard input, a pipe, bytes in memory).
    pub fn reader(shown: &str, stem: &str, reader: impl Read + Send + 'static) -> Input {
        Input {
            shown: shown.into(),
            stem: stem.into(),
            open: Box::new(move || Ok(Box::new(reader) as Box<dyn Read + Send>)),
        }
    }
}

impl std::fmt::Debug for Input {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("Input")
            .field("shown", &self.shown)
            .field("stem", &self.stem)
            .finish_non_exhaustive()
    }
}

/// The inputs and settings of a run.
pub struct RunSpec<'a> {
    /// The inputs, read in this order.
    pub inputs: Vec<Input>,
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
fn stem(path: &Path) -> String {
    path.file_stem()
        .map(|s| s.to_string_lossy().into_owned())
        .filter(|s| !s.is_empty())
        .unwrap_or_else(|| "plate".into())
}

/// What the reader thread shares across inputs.
struct ReaderSide<'a> {
    reading: Reading,
    counter: &'a AtomicU64,
    tx: mpsc::SyncSender<Message>,
}

/// Read one input to its end, sending its plates; what happened to it.
fn read_input(index: usize, input: Input, side: &ReaderSide) -> InputSummary {
    let ReaderSide {
        reading,
        counter,
        tx,
    } = side;
    let mut summary = InputSummary {
        path: input.shown,
        layout: None,
        bytes: 0,
        sha256: None,
        plates: 0,
        error: None,
    };
    let tap = match (input.open)() {
        Ok(inner) => Tap {
            inner,
            hasher: Sha256::new(),
            bytes: 0,
            counter,
        },
        Err(e) => {
            summary.error = Some(e.to_string());
            return summary;
        }
    };
    let mut stream = match PlateStream::open(tap, &input.stem, reading) {
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
pub fn run<R, F, S>(spec: RunSpec, models: &Models, render: F, mut sink: S) -> std::io::Result<()>
where
    R: Send,
    F: Fn(&mut PlateResult) -> R + Sync,
    S: FnMut(Event<R>) -> std::io::Result<()> + Send,
{
    let window = WINDOW_PER_THREAD * rayon::current_num_threads().max(1);
    let (tx, rx) = mpsc::sync_channel::<Message>(window);
    let workers = Workers {
        shown_inputs: spec.inputs.iter().map(|i| i.shown.clone()).collect(),
        map: spec.map,
        reading: spec.reading.clone(),
        options: spec.options,
        models,
        render,
        window,
    };
    let RunSpec {
        inputs,
        reading,
        bytes_read,
        ..
    } = spec;
    std::thread::scope(|scope| {
        let side = ReaderSide {
            reading,
            counter: bytes_read,
            tx,
        };
        let reader = scope.spawn(move || {
            for (i, input) in inputs.into_iter().enumerate() {
                let s = read_input(i, input, &side);
                if side.tx.send(Message::Input(s)).is_err() {
                    return;
                }
            }
        });
        let outcome = workers.drain(&rx, &mut sink);
        // On a sink error, stop the reader by dropping the receiver.
        drop(rx);
        let _ = reader.join();
        outcome
    })
}

/// Plates between the reader and the sink.
struct Queue<R> {
    /// Read, waiting to be processed (with their input's index).
    pending: Vec<(usize, RawPlate)>,
    /// Processed but not yet handed to the sink.
    done: Vec<(Box<PlateResult>, R)>,
}

/// What the worker threads need to turn a raw plate into a result.
struct Workers<'a, F> {
    shown_inputs: Vec<String>,
    map: Option<&'a PlateMap>,
    reading: Reading,
    options: &'a BatchOptions,
    models: &'a Models<'a>,
    render: F,
    window: usize,
}

impl<F: Sync> Workers<'_, F> {
    /// Parse, fit and render one plate.
    fn process<R>(&self, input: usize, raw: RawPlate) -> (Box<PlateResult>, R)
    where
        F: Fn(&mut PlateResult) -> R,
    {
        let input_name = &self.shown_inputs[input];
        let name = raw.name.clone();
        let entries = self.map.and_then(|m| m.for_plate(&name));
        let mut result = match raw.parse(&self.reading) {
            Ok(spectra) => {
                let mut r = process_plate(
                    spectra,
                    input_name,
                    entries.as_ref(),
                    self.models,
                    self.options,
                );
                if self.map.is_some() && entries.is_none() {
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
        let r = (self.render)(&mut result);
        (Box::new(result), r)
    }

    /// Hand the processed plates to the sink while the next window is
    /// processed in parallel: the sink writes one window while the workers
    /// work on the next.
    fn step<R, S>(&self, queue: &mut Queue<R>, sink: &mut S) -> io::Result<()>
    where
        R: Send,
        F: Fn(&mut PlateResult) -> R,
        S: FnMut(Event<R>) -> io::Result<()> + Send,
    {
        let ready = std::mem::take(&mut queue.done);
        let work = std::mem::take(&mut queue.pending);
        let (written, next) = rayon::join(
            || -> io::Result<()> {
                for (p, r) in ready {
                    sink(Event::Plate(p, r))?;
                }
                Ok(())
            },
            || {
                work.into_par_iter()
                    .map(|(input, raw)| self.process(input, raw))
                    .collect::<Vec<_>>()
            },
        );
        queue.done = next;
        written
    }

    /// Take the reader's messages until it is done, processing plates a
    /// window at a time and passing events to the sink in input order.
    fn drain<R, S>(&self, rx: &mpsc::Receiver<Message>, sink: &mut S) -> io::Result<()>
    where
        R: Send,
        F: Fn(&mut PlateResult) -> R,
        S: FnMut(Event<R>) -> io::Result<()> + Send,
    {
        let mut seen: HashMap<String, String> = HashMap::new();
        let mut queue = Queue {
            pending: Vec::with_capacity(self.window),
            done: Vec::new(),
        };
        for message in rx.iter() {
            match message {
                Message::Plate(input, raw) => {
                    let raw = unique_name(&mut seen, raw, &self.shown_inputs[input]);
                    queue.pending.push((input, raw));
                    if queue.pending.len() >= self.window {
                        self.step(&mut queue, sink)?;
                    }
                }
                Message::Input(s) => {
                    // Everything before the input's end goes out first.
                    self.step(&mut queue, sink)?;
                    self.step(&mut queue, sink)?;
                    sink(Event::Input(s))?;
                }
            }
        }
        self.step(&mut queue, sink)?;
        self.step(&mut queue, sink)
    }
}

/// The plate as read, or a failed plate when an earlier one had its name
/// (plate names are unique in a run); `seen` maps names to their input.
fn unique_name(seen: &mut HashMap<String, String>, raw: RawPlate, input: &str) -> RawPlate {
    match seen.get(&raw.name) {
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
            seen.insert(raw.name.clone(), input.to_string());
            raw
        }
    }
}
