//! `fit --format jsonl`: one JSON object per sample, in input order, the
//! same objects as the JSON document's `samples` and `failed` entries.
//!
//! Outside reference: the JSON Lines convention (jsonlines.org): UTF-8, one
//! complete JSON value per line, each line ended by `\n`.

use serde_json::Value;
use std::process::Command;

const BIN: &str = env!("CARGO_BIN_EXE_unblend");
const ROOT: &str = env!("CARGO_MANIFEST_DIR");

fn fit(input: &str, format: &str) -> (String, i32) {
    let out = Command::new(BIN)
        .current_dir(ROOT)
        .args(["fit", input, "--library", "library", "--format", format])
        .output()
        .unwrap();
    (
        String::from_utf8(out.stdout).unwrap(),
        out.status.code().unwrap(),
    )
}

/// Each line of a JSON Lines text, parsed; checks the line structure.
fn lines(text: &str) -> Vec<Value> {
    assert!(text.ends_with('\n'), "the last line ends with a newline");
    text.lines()
        .map(|l| {
            assert!(!l.is_empty() && !l.contains('\r'));
            let v: Value = serde_json::from_str(l).unwrap();
            assert!(v.is_object());
            v
        })
        .collect()
}

#[test]
fn wide_and_long_inputs_give_one_object_per_sample_as_in_the_json_document() {
    for input in ["demo-data/lot-check.csv", "demo-data/lot-check-long.csv"] {
        let (jsonl, code) = fit(input, "jsonl");
        let (json, code_json) = fit(input, "json");
        assert_eq!(code, code_json);
        let objects = lines(&jsonl);
        let doc: Value = serde_json::from_str(&json).unwrap();
        let samples = doc["samples"].as_array().unwrap();
        let failed = doc["failed"].as_array().unwrap();
        assert_eq!(objects.len(), samples.len() + failed.len());
        let (fitted, errors): (Vec<&Value>, Vec<&Value>) =
            objects.iter().partition(|o| o.get("error").is_none());
        assert_eq!(fitted, samples.iter().collect::<Vec<_>>(), "{input}");
        assert_eq!(errors, failed.iter().collect::<Vec<_>>(), "{input}");
        // The demo's lots, in the file's order.
        assert_eq!(objects[0]["sample"], "blank-1");
    }
}

#[test]
fn a_bad_row_is_an_error_line_and_the_others_are_fitted() {
    let dir = std::env::temp_dir().join(format!("unblend-jsonl-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let text = std::fs::read_to_string(format!("{ROOT}/demo-data/lot-check.csv")).unwrap();
    let mut rows: Vec<String> = text.lines().take(4).map(String::from).collect();
    rows[2] = rows[2].replacen(",0.", ",x", 1);
    let input = dir.join("bad.csv");
    std::fs::write(&input, rows.join("\n") + "\n").unwrap();
    let (jsonl, code) = fit(input.to_str().unwrap(), "jsonl");
    assert_eq!(code, 3, "partial");
    let objects = lines(&jsonl);
    assert_eq!(objects.len(), 3);
    assert!(objects[1]["error"].as_str().unwrap().contains("line 3"));
    assert!(objects[0].get("error").is_none() && objects[2].get("error").is_none());
    std::fs::remove_dir_all(&dir).unwrap();
}
