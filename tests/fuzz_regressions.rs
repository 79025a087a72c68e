//! Replays the fuzz corpus and every crash input kept from fuzzing through
//! the parsers, in the normal test suite: none may panic.
//!
//! Files live in `tests/fuzz/corpus/<target>/` (seed inputs) and
//! `tests/fuzz/regressions/<target>/` (inputs that once crashed a parser);
//! `<target>` names a function in `tests/fuzz/drive.rs`, the same code the
//! fuzz targets run (see DEVELOPERS.md, "Fuzzing").

#[path = "fuzz/drive.rs"]
mod drive;

use std::path::Path;

const ROOT: &str = env!("CARGO_MANIFEST_DIR");

fn replay(kind: &str) -> usize {
    let mut n = 0;
    for (target, run) in drive::TARGETS {
        let dir = Path::new(ROOT).join("tests/fuzz").join(kind).join(target);
        let Ok(entries) = std::fs::read_dir(&dir) else {
            continue;
        };
        let mut paths: Vec<_> = entries.filter_map(|e| e.ok().map(|e| e.path())).collect();
        paths.sort();
        for path in paths.iter().filter(|p| p.is_file()) {
            let bytes = std::fs::read(path).expect("corpus file is readable");
            let outcome = std::panic::catch_unwind(|| run(&bytes));
            assert!(outcome.is_ok(), "{target} panicked on {}", path.display());
            n += 1;
        }
    }
    n
}

#[test]
fn every_corpus_input_parses_without_panicking() {
    let n = replay("corpus");
    assert!(n >= 6, "expected at least one seed per target, found {n}");
}

#[test]
fn every_kept_crash_input_parses_without_panicking() {
    // Folders may be empty when fuzzing found nothing for a target; the
    // files that are there must all pass.
    replay("regressions");
}

#[test]
fn every_parser_has_a_fuzz_target_and_seeds() {
    for (target, _) in drive::TARGETS {
        let fuzz = Path::new(ROOT).join("tests/fuzz");
        assert!(
            fuzz.join("fuzz_targets")
                .join(format!("{target}.rs"))
                .is_file(),
            "no fuzz target for {target}"
        );
        let seeds = std::fs::read_dir(fuzz.join("corpus").join(target))
            .map(|d| d.count())
            .unwrap_or(0);
        assert!(seeds > 0, "no seed inputs for {target}");
    }
}
