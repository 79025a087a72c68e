//! Streamed fitting (stages 3–5 over a wide file read chunk by chunk):
//! memory stays bounded whatever the number of spectra.
//!
//! In: a reader of a wide spectra CSV. Out: each chunk's outcomes, in input
//! order, to a sink; the run's warnings.

use super::*;

/// Merge a chunk's fitted block and its failed rows into input order.
pub fn merge_chunk(
    block: &Block,
    fitted: Vec<Outcome>,
    failures: Vec<crate::input::spectra::RowFailure>,
) -> Vec<Outcome> {
    if failures.is_empty() {
        // Already in input order: nothing to move.
        return fitted;
    }
    // Both sides are in input order: one merge, each outcome moved once.
    let mut out = Vec::with_capacity(fitted.len() + failures.len());
    let mut failed = failures
        .into_iter()
        .map(|f| {
            (
                f.position,
                Outcome::Failed(FailedSample {
                    sample: f.sample,
                    error: f.error.to_string(),
                }),
            )
        })
        .peekable();
    for (&p, o) in block.positions.iter().zip(fitted) {
        while let Some((_, f)) = failed.next_if(|(q, _)| *q < p) {
            out.push(f);
        }
        out.push(o);
    }
    out.extend(failed.map(|(_, f)| f));
    out
}

/// Fit a wide file chunk by chunk, handing each chunk's outcomes (in input
/// order) to `sink`, so memory stays bounded. Reading and parsing the next
/// chunk (on a reader thread) overlaps fitting and writing this one.
/// Returns the run's warnings.
pub fn fit_stream<R: std::io::Read + Send, E>(
    stream: &mut crate::input::spectra::WideStream<R>,
    refs: &ReferenceSet,
    options: &FitOptions,
    sink: impl FnMut(Vec<Outcome>) -> std::result::Result<(), E>,
) -> std::result::Result<Vec<String>, StreamError<E>> {
    fit_stream_with(
        stream,
        refs,
        options,
        &diagnostics::Options::default(),
        sink,
    )
}

/// [`fit_stream`] with the given checks.
pub fn fit_stream_with<R: std::io::Read + Send, E>(
    stream: &mut crate::input::spectra::WideStream<R>,
    refs: &ReferenceSet,
    options: &FitOptions,
    checks: &diagnostics::Options,
    mut sink: impl FnMut(Vec<Outcome>) -> std::result::Result<(), E>,
) -> std::result::Result<Vec<String>, StreamError<E>> {
    use std::sync::mpsc;
    checks.validate().map_err(StreamError::Engine)?;
    let model =
        Model::with_checks(stream.grid(), refs, options, checks).map_err(StreamError::Engine)?;
    let warnings: Vec<String> = model
        .method_warning()
        .into_iter()
        .chain(model.separability_warnings())
        .chain(model.check_warnings().iter().cloned())
        .collect();
    let header = stream.header.clone();
    let read_options = stream.options();
    std::thread::scope(|scope| {
        let (tx, rx) = mpsc::sync_channel::<Result<crate::input::spectra::RawChunk>>(1);
        let (back_tx, back_rx) = mpsc::channel::<Vec<u8>>();
        scope.spawn(move || {
            // Chunks handed to the fitter and not yet given back. Past
            // `STREAM_BUFFERS` the reader waits for one to come back and
            // reuses its storage: fresh buffers cost page faults, recycled
            // ones do not.
            let mut in_flight = 0usize;
            loop {
                let back = if in_flight >= STREAM_BUFFERS {
                    back_rx.recv().ok()
                } else {
                    back_rx.try_recv().ok()
                };
                if back.is_some() {
                    in_flight -= 1;
                }
                let item = match stream.next_raw_chunk(back) {
                    Ok(Some(c)) => Ok(c),
                    Ok(None) => break,
                    Err(e) => Err(e),
                };
                let stop = item.is_err();
                if tx.send(item).is_err() || stop {
                    break;
                }
                in_flight += 1;
            }
        });
        // Leaving this loop early drops `rx`, which stops the reader.
        for item in rx {
            let chunk = item.map_err(StreamError::Engine)?;
            let outcomes =
                model.parse_and_fit(&chunk, &header, read_options, options.pathlength_cm);
            let _ = back_tx.send(chunk.text);
            sink(outcomes).map_err(StreamError::Sink)?;
        }
        Ok(warnings)
    })
}

impl Model {
    /// Parse and fit every line of a raw chunk in parallel, in fixed pieces
    /// of [`CHUNK`] lines (as [`Model::fit_block`]): each row is fitted right
    /// after it is parsed, while it is in cache. Rows that cannot be read
    /// are failed outcomes in their place; outcomes in input order.
    pub fn parse_and_fit(
        &self,
        chunk: &crate::input::spectra::RawChunk,
        header: &crate::input::spectra::WideHeader,
        read_options: crate::input::spectra::ReadOptions,
        pathlength_cm: f64,
    ) -> Vec<Outcome> {
        let n = header.grid.len();
        let idx: Vec<usize> = (0..chunk.lines.len()).collect();
        let out: Vec<Vec<Outcome>> = idx
            .par_chunks(CHUNK)
            .map(|piece| {
                let mut ws = self.prepared.workspace();
                let mut row = vec![0.0; n];
                let mut scratch = Vec::new();
                piece
                    .iter()
                    .map(|&i| {
                        let line = chunk.line(i);
                        let line_no = chunk.lines[i].line_no;
                        match header.parse_row(line, line_no, read_options, &mut row, &mut scratch)
                        {
                            Ok(id) => self.fit_named(id, &row, pathlength_cm, &mut ws),
                            Err((sample, error)) => Outcome::Failed(FailedSample {
                                sample,
                                error: error.to_string(),
                            }),
                        }
                    })
                    .collect()
            })
            .collect();
        out.into_iter().flatten().collect()
    }
}

/// Chunk buffers a streamed fit keeps in circulation: one being read, one
/// queued, one being fitted.
const STREAM_BUFFERS: usize = 3;

/// Why a streamed fit stopped.
#[derive(Debug)]
pub enum StreamError<E> {
    /// Reading or modelling failed.
    Engine(Error),
    /// The sink (writer) failed.
    Sink(E),
}
