//! The bad-artifact corpus: broken model artifacts that loading must reject, each with the
//! exact JSON path and rule the rejection must name.
//!
//! Layout of `tests/bad-artifacts/`:
//!
//! - `base-trees.json`: a small *valid* tree-ensemble artifact, and `base-graph.json` a valid
//!   graph model (a small neural network imported from tests/reference/fixtures/onnx; the logistic
//!   base is the demo model `models/fernhill-logistic.json`). Every base must load.
//! - `<case>.json`: one broken artifact, written as a patch of a base:
//!   ```json
//!   {"description": "why this is wrong, one sentence",
//!    "base": "models/fernhill-logistic.json",
//!    "set": {"/json/pointer": <new value>},
//!    "remove": ["/json/pointer"],
//!    "expect": {"path": "$.exact.path", "rule": "rule_name"}}
//!   ```
//!   `set` (RFC 6901 pointers, applied in file order) replaces a value, inserts a missing
//!   object key, or appends to an array with the index `-`; `remove` (applied after `set`)
//!   deletes an object key or array element. Both are optional; a pointer that does not
//!   resolve is a mistake in the case, not a pass.
//! - `raw/<name>.txt`: bytes a patch cannot express (not JSON, truncated, empty, ...), with
//!   expectations in `raw/expect.json`: `{"<name>.txt": {"path": "$", "rule": "json"}}`.
//!
//! Every case must fail to load, without panicking, with exactly the expected path and rule.
//! Every file in the folder must be a base, a case, or a listed raw case.

use plumbline::{ArtifactError, LoadedModel};
use serde::Deserialize;
use serde_json::Value;
use std::collections::BTreeMap;
use std::panic::{catch_unwind, AssertUnwindSafe};
use std::path::{Path, PathBuf};

/// The corpus must not shrink below this many patch and raw cases together.
const MIN_CASES: usize = 40;

const LOGISTIC_BASE: &str = "models/fernhill-logistic.json";
const TREES_BASE: &str = "tests/bad-artifacts/base-trees.json";
const GRAPH_BASE: &str = "tests/bad-artifacts/base-graph.json";

/// What a case expects the loader to report.
#[derive(Debug, Deserialize, PartialEq, Eq)]
#[serde(deny_unknown_fields)]
struct Expect {
    path: String,
    rule: String,
}

/// One patch case file. Unknown keys are refused so that a typo ("sett") cannot silently
/// turn a case into an unpatched base.
#[derive(Debug, Deserialize)]
#[serde(deny_unknown_fields)]
struct Case {
    description: String,
    base: String,
    #[serde(default)]
    set: Patches,
    #[serde(default)]
    remove: Vec<String>,
    expect: Expect,
}

/// The `set` object as (pointer, value) pairs in file order: serde_json's `Map` sorts its keys
/// (no `preserve_order`), and the order matters when one pointer builds on another.
#[derive(Debug, Default)]
struct Patches(Vec<(String, Value)>);

impl<'de> Deserialize<'de> for Patches {
    fn deserialize<D: serde::Deserializer<'de>>(d: D) -> Result<Self, D::Error> {
        struct InOrder;
        impl<'de> serde::de::Visitor<'de> for InOrder {
            type Value = Patches;
            fn expecting(&self, f: &mut std::fmt::Formatter) -> std::fmt::Result {
                f.write_str("an object of JSON pointer -> new value")
            }
            fn visit_map<A: serde::de::MapAccess<'de>>(
                self,
                mut map: A,
            ) -> Result<Patches, A::Error> {
                let mut out: Vec<(String, Value)> = Vec::new();
                while let Some((k, v)) = map.next_entry::<String, Value>()? {
                    if out.iter().any(|(seen, _)| *seen == k) {
                        return Err(serde::de::Error::custom(format!(
                            "pointer {k} is set twice"
                        )));
                    }
                    out.push((k, v));
                }
                Ok(Patches(out))
            }
        }
        d.deserialize_map(InOrder)
    }
}

fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

fn corpus() -> PathBuf {
    root().join("tests/bad-artifacts")
}

fn read(path: &Path) -> Vec<u8> {
    std::fs::read(path).unwrap_or_else(|e| panic!("cannot read {}: {e}", path.display()))
}

/// Loads bytes, turning a panic inside the loader into an `Err` with its message.
fn load(bytes: &[u8]) -> Result<Result<LoadedModel, ArtifactError>, String> {
    catch_unwind(AssertUnwindSafe(|| LoadedModel::from_slice(bytes))).map_err(|p| {
        p.downcast_ref::<String>()
            .cloned()
            .or_else(|| p.downcast_ref::<&str>().map(|s| s.to_string()))
            .unwrap_or_else(|| "(non-string panic payload)".to_string())
    })
}

/// Checks one load result against an expectation; `Err` holds a line for the failure report.
fn check(name: &str, bytes: &[u8], expect: &Expect) -> Result<(), String> {
    match load(bytes) {
        Err(panic) => Err(format!("{name}: PANICKED while loading: {panic}")),
        Ok(Ok(_)) => Err(format!(
            "{name}: loaded, but should be rejected at {} [{}]",
            expect.path, expect.rule
        )),
        Ok(Err(e)) if e.path == expect.path && e.rule == expect.rule => Ok(()),
        Ok(Err(e)) => Err(format!(
            "{name}: expected {} [{}], got {} [{}]: {}",
            expect.path, expect.rule, e.path, e.rule, e.message
        )),
    }
}

/// RFC 6901 reference token unescaping.
fn unescape(token: &str) -> String {
    token.replace("~1", "/").replace("~0", "~")
}

/// Splits a pointer into its parent pointer and last token; `None` for the root pointer "".
fn split_pointer(pointer: &str) -> Option<(&str, String)> {
    let cut = pointer.rfind('/')?;
    Some((&pointer[..cut], unescape(&pointer[cut + 1..])))
}

/// Sets `pointer` in `doc`: replaces an existing value, inserts a new object key, or appends
/// to an array when the last token is `-`.
fn set(doc: &mut Value, pointer: &str, value: Value) -> Result<(), String> {
    let Some((parent, key)) = split_pointer(pointer) else {
        *doc = value;
        return Ok(());
    };
    match doc.pointer_mut(parent) {
        Some(Value::Object(map)) => {
            map.insert(key, value);
            Ok(())
        }
        Some(Value::Array(items)) if key == "-" => {
            items.push(value);
            Ok(())
        }
        Some(Value::Array(items)) => match key.parse::<usize>() {
            Ok(i) if i < items.len() => {
                items[i] = value;
                Ok(())
            }
            _ => Err(format!(
                "set {pointer}: no element {key} in an array of {}",
                items.len()
            )),
        },
        Some(_) => Err(format!(
            "set {pointer}: parent is neither an object nor an array"
        )),
        None => Err(format!("set {pointer}: parent {parent:?} does not exist")),
    }
}

/// Removes the value at `pointer`, which must exist.
fn remove(doc: &mut Value, pointer: &str) -> Result<(), String> {
    let (parent, key) = split_pointer(pointer).ok_or("remove: cannot remove the root")?;
    let removed = match doc.pointer_mut(parent) {
        Some(Value::Object(map)) => map.remove(&key).is_some(),
        Some(Value::Array(items)) => match key.parse::<usize>() {
            Ok(i) if i < items.len() => {
                items.remove(i);
                true
            }
            _ => false,
        },
        _ => false,
    };
    if removed {
        Ok(())
    } else {
        Err(format!("remove {pointer}: nothing there"))
    }
}

/// Builds the artifact bytes of one patch case.
fn build(name: &str, case: &Case) -> Result<Vec<u8>, String> {
    if case.description.trim().is_empty() {
        return Err(format!("{name}: empty description"));
    }
    let base_path = root().join(&case.base);
    let base = std::fs::read(&base_path).map_err(|e| format!("{name}: base {}: {e}", case.base))?;
    let mut doc: Value =
        serde_json::from_slice(&base).map_err(|e| format!("{name}: base {}: {e}", case.base))?;
    for (pointer, value) in &case.set.0 {
        set(&mut doc, pointer, value.clone()).map_err(|e| format!("{name}: {e}"))?;
    }
    for pointer in &case.remove {
        remove(&mut doc, pointer).map_err(|e| format!("{name}: {e}"))?;
    }
    Ok(serde_json::to_vec(&doc).unwrap())
}

/// Sorted file names (not directories) directly inside `dir`.
fn files_in(dir: &Path) -> Vec<String> {
    let mut names: Vec<String> = std::fs::read_dir(dir)
        .unwrap_or_else(|e| panic!("cannot list {}: {e}", dir.display()))
        .map(|e| e.unwrap())
        .filter(|e| e.file_type().unwrap().is_file())
        .map(|e| e.file_name().into_string().unwrap())
        .collect();
    names.sort();
    names
}

/// Patch case names (file names without `.json`), sorted.
fn patch_cases() -> Vec<String> {
    files_in(&corpus())
        .into_iter()
        .filter(|f| f.ends_with(".json") && f != "base-trees.json" && f != "base-graph.json")
        .map(|f| f.trim_end_matches(".json").to_string())
        .collect()
}

fn raw_expectations() -> BTreeMap<String, Expect> {
    let path = corpus().join("raw/expect.json");
    serde_json::from_slice(&read(&path)).unwrap_or_else(|e| panic!("{}: {e}", path.display()))
}

#[test]
fn every_base_loads() {
    for base in [LOGISTIC_BASE, TREES_BASE, GRAPH_BASE] {
        match load(&read(&root().join(base))) {
            Err(panic) => panic!("{base}: panicked: {panic}"),
            Ok(Err(e)) => panic!("{base} must load: {e}"),
            Ok(Ok(m)) => assert!(m.width() > 0, "{base}: no columns"),
        }
    }
}

#[test]
fn patch_cases_are_rejected_with_the_expected_path_and_rule() {
    let mut failures = Vec::new();
    for name in patch_cases() {
        let path = corpus().join(format!("{name}.json"));
        let text = String::from_utf8(read(&path)).expect("case files are UTF-8");
        let outcome = serde_json::from_str::<Case>(&text)
            .map_err(|e| format!("{name}: not a valid case file: {e}"))
            .and_then(|case| build(&name, &case).map(|bytes| (case, bytes)))
            .and_then(|(case, bytes)| check(&name, &bytes, &case.expect));
        if let Err(f) = outcome {
            failures.push(f);
        }
    }
    assert!(
        failures.is_empty(),
        "{} case(s) failed:\n  {}",
        failures.len(),
        failures.join("\n  ")
    );
}

#[test]
fn raw_cases_are_rejected_with_the_expected_path_and_rule() {
    let dir = corpus().join("raw");
    let mut failures = Vec::new();
    for (name, expect) in raw_expectations() {
        let path = dir.join(&name);
        match std::fs::read(&path) {
            Ok(bytes) => {
                if let Err(f) = check(&format!("raw/{name}"), &bytes, &expect) {
                    failures.push(f);
                }
            }
            Err(e) => failures.push(format!(
                "raw/{name}: listed in expect.json but cannot be read: {e}"
            )),
        }
    }
    assert!(
        failures.is_empty(),
        "{} raw case(s) failed:\n  {}",
        failures.len(),
        failures.join("\n  ")
    );
}

#[test]
fn corpus_is_large_enough_and_has_no_stray_files() {
    let patches = patch_cases();
    let raw = raw_expectations();
    let total = patches.len() + raw.len();
    assert!(
        total >= MIN_CASES,
        "the corpus has {total} cases, fewer than {MIN_CASES}"
    );

    // Top level: the tree and graph bases, patch cases, and the raw folder; nothing else.
    let stray: Vec<String> = files_in(&corpus())
        .into_iter()
        .filter(|f| !f.ends_with(".json"))
        .collect();
    assert!(
        stray.is_empty(),
        "files in tests/bad-artifacts/ that are not cases: {stray:?}"
    );
    for entry in std::fs::read_dir(corpus()).unwrap() {
        let entry = entry.unwrap();
        if entry.file_type().unwrap().is_dir() {
            assert_eq!(
                entry.file_name(),
                "raw",
                "unexpected folder in tests/bad-artifacts/"
            );
        }
    }

    // raw/: expect.json and exactly the files it lists.
    let unused: Vec<String> = files_in(&corpus().join("raw"))
        .into_iter()
        .filter(|f| f != "expect.json" && !raw.contains_key(f))
        .collect();
    assert!(
        unused.is_empty(),
        "raw files without an expectation in raw/expect.json: {unused:?}"
    );
    assert!(
        !std::fs::read_dir(corpus().join("raw")).unwrap().any(|e| e
            .unwrap()
            .file_type()
            .unwrap()
            .is_dir()),
        "no folders inside tests/bad-artifacts/raw/"
    );
}
