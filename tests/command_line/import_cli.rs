//! `plumbline import` as a model developer runs it: the binary imports an exported model,
//! `inspect` shows where it came from, and the service started from the binary decides with it,
//! byte for byte as `score` does and with onnxruntime's probability (fixture of
//! tests/pipeline/onnx_import.rs, written by tests/reference/make_onnx.py).

use crate::common::server::{send, SCORING};
use crate::common::stores::TempDir;
use std::io::{BufRead, BufReader};
use std::process::{Child, Command, Output, Stdio};

const FX: &str = "tests/reference/fixtures/onnx";

fn plumbline(args: &[&str]) -> Output {
    Command::new(env!("CARGO_BIN_EXE_plumbline"))
        .args(args)
        .output()
        .unwrap()
}

fn text(b: &[u8]) -> String {
    String::from_utf8_lossy(b).into_owned()
}

fn import_lightgbm(out: &str) -> Output {
    plumbline(&[
        "import",
        &format!("{FX}/lightgbm.onnx"),
        "--spec",
        &format!("{FX}/spec_missing.json"),
        "--reference",
        &format!("{FX}/missing.csv"),
        "--out",
        out,
    ])
}

/// The service as the README starts it, on a free port; killed on drop.
struct Served(Child, String);

impl Served {
    fn start(model: &str, store: &str) -> Self {
        let mut child = Command::new(env!("CARGO_BIN_EXE_plumbline"))
            .args([
                "serve",
                "--model",
                model,
                "--keys",
                "models/demo-keys.json",
                "--store",
                store,
                "--addr",
                "127.0.0.1:0",
            ])
            .stderr(Stdio::piped())
            .spawn()
            .unwrap();
        let mut lines = BufReader::new(child.stderr.take().unwrap()).lines();
        let base = loop {
            let line = lines.next().expect("serve exited early").unwrap();
            if let Some(url) = line.strip_prefix("plumbline listening on ") {
                break url.to_string();
            }
        };
        // Keep draining the log so the server never blocks on a full pipe.
        std::thread::spawn(move || for _ in lines {});
        Served(child, base)
    }
}

impl Drop for Served {
    fn drop(&mut self) {
        let _ = self.0.kill();
        let _ = self.0.wait();
    }
}

/// Decides `applicant` with `plumbline score` and with the service started from the binary;
/// checks the service's bytes are the command line's plus the record; returns the decision.
fn decide_both_ways(
    dir: &TempDir,
    artifact: &str,
    id: &str,
    applicant: &serde_json::Value,
) -> serde_json::Value {
    let request = serde_json::json!({"application_id": id, "applicant": applicant});
    let request_path = dir.0.join(format!("{id}.json"));
    std::fs::write(&request_path, request.to_string()).unwrap();
    let cli = text(
        &plumbline(&[
            "score",
            "--model",
            artifact,
            &request_path.display().to_string(),
        ])
        .stdout,
    );
    let store = format!("sqlite:{}", dir.0.join(format!("{id}.sqlite3")).display());
    let served = Served::start(artifact, &store);
    let (status, _, body) = send(
        "POST",
        &format!("{}/v1/decisions", served.1),
        Some(SCORING),
        Some("application/json"),
        Some(&request.to_string()),
    );
    assert_eq!(status, 200, "{body}");
    let decision = cli.trim_end().strip_suffix('}').unwrap();
    assert!(body.starts_with(decision), "service {body}\ncli {cli}");
    serde_json::from_str(&body).unwrap()
}

#[test]
fn import_inspect_serve_decide() {
    let dir = TempDir::new();
    let artifact = dir.0.join("lightgbm.json").display().to_string();
    let out = import_lightgbm(&artifact);
    let err = text(&out.stderr);
    assert_eq!(out.status.code(), Some(0), "{err}");
    assert!(
        err.contains("wrote") && err.contains("model-risk review"),
        "{err}"
    );
    assert!(err.contains("AUC"), "{err}");

    // inspect says where the model came from.
    let fixture: serde_json::Value =
        serde_json::from_slice(&std::fs::read(format!("{FX}/expected.json")).unwrap()).unwrap();
    let onnx = std::fs::read(format!("{FX}/lightgbm.onnx")).unwrap();
    let shown = text(&plumbline(&["inspect", &artifact]).stdout);
    for want in [
        "imported".to_string(),
        format!(
            "ONNX file sha256 {}",
            plumbline::artifact::sha256_hex(&onnx)
        ),
        format!(
            "written by OnnxMLTools {}",
            fixture["libraries"]["onnxmltools"].as_str().unwrap()
        ),
        "graph \"lightgbm\"".to_string(),
        "operator TreeEnsembleClassifier on float32 input \"input\"".to_string(),
    ] {
        assert!(shown.contains(&want), "inspect lacks {want:?}:\n{shown}");
    }

    // The service decides with it: the command line's bytes, onnxruntime's probability.
    let case = (fixture["cases"].as_array().unwrap().iter())
        .find(|c| c["name"] == "lightgbm")
        .unwrap();
    let row = &case["rows"][3];
    let got = decide_both_ways(&dir, &artifact, "FX-IMPORT-1", &row["applicant"]);
    let p = got["probability_of_default"].as_f64().unwrap();
    let want = row["onnxruntime"].as_f64().unwrap();
    assert!((p - want).abs() <= 2e-7, "{p} vs onnxruntime {want}");
    assert_eq!(got["model"]["id"], "onnx-fixture");
    assert_eq!(got["contributions"]["method"], "tree_cover_weighted");
}

#[test]
fn refused_imports_write_nothing() {
    let dir = TempDir::new();
    let out_path = dir.0.join("never.json");
    let out = plumbline(&[
        "import",
        &format!("{FX}/refuse_categorical_split.onnx"),
        "--spec",
        &format!("{FX}/spec.json"),
        "--reference",
        &format!("{FX}/complete.csv"),
        "--out",
        &out_path.display().to_string(),
    ]);
    assert_eq!(out.status.code(), Some(2));
    let err = text(&out.stderr);
    assert!(
        err.contains("BRANCH_EQ") && err.contains("nothing was written"),
        "{err}"
    );
    assert!(!out_path.exists());

    // Hessian covers are for boosted log-odds models, not forests.
    let out = plumbline(&[
        "import",
        &format!("{FX}/random_forest.onnx"),
        "--spec",
        &format!("{FX}/spec.json"),
        "--reference",
        &format!("{FX}/complete.csv"),
        "--covers",
        "hessian",
        "--out",
        &out_path.display().to_string(),
    ]);
    assert_eq!(out.status.code(), Some(2));
    assert!(text(&out.stderr).contains("hessian covers need a boosted"));
    assert!(!out_path.exists());

    // A reference CSV that breaks the spec's field rules is named by row and column.
    let bad_csv = dir.0.join("bad.csv");
    let csv = std::fs::read_to_string(format!("{FX}/complete.csv")).unwrap();
    let mut lines: Vec<String> = csv.lines().map(String::from).collect();
    lines[5] = lines[5].replacen(|c: char| c.is_ascii_digit() || c == '-', "x", 1);
    std::fs::write(&bad_csv, lines.join("\n")).unwrap();
    let out = plumbline(&[
        "import",
        &format!("{FX}/random_forest.onnx"),
        "--spec",
        &format!("{FX}/spec.json"),
        "--reference",
        &bad_csv.display().to_string(),
        "--out",
        &out_path.display().to_string(),
    ]);
    assert_eq!(out.status.code(), Some(2));
    let err = text(&out.stderr);
    assert!(err.contains("row 5, column x0: \"x"), "{err}");
    assert!(
        !err.contains("missing or null"),
        "one problem per cell: {err}"
    );
    assert!(!out_path.exists());
}

#[test]
fn a_neural_network_imports_serves_and_explains() {
    let dir = TempDir::new();
    let artifact = dir.0.join("mlp.json").display().to_string();
    let out = plumbline(&[
        "import",
        &format!("{FX}/mlp_relu.onnx"),
        "--spec",
        &format!("{FX}/spec.json"),
        "--reference",
        &format!("{FX}/complete.csv"),
        "--background",
        &format!("{FX}/background.csv"),
        "--out",
        &artifact,
    ]);
    let err = text(&out.stderr);
    assert_eq!(out.status.code(), Some(0), "{err}");
    assert!(
        err.contains("graph kept whole") && err.contains("exact interventional Shapley"),
        "{err}"
    );
    let shown = text(&plumbline(&["inspect", &artifact]).stdout);
    for want in [
        "ONNX graph, evaluated",
        "operators: Scaler, Cast, MatMul x3, Add x3, Relu x2, Sigmoid, Sub, Concat",
        "parameters: ",
        "shapley_interventional",
        "background of 50 rows, all 64 coalitions: 3200 model evaluations per decision",
        "explanation background: the --background file",
    ] {
        assert!(shown.contains(want), "inspect lacks {want:?}:\n{shown}");
    }

    let fixture: serde_json::Value =
        serde_json::from_slice(&std::fs::read(format!("{FX}/expected.json")).unwrap()).unwrap();
    let case = (fixture["cases"].as_array().unwrap().iter())
        .find(|c| c["name"] == "mlp_relu")
        .unwrap();
    let row = &case["rows"][0];
    let got = decide_both_ways(&dir, &artifact, "FX-MLP-1", &row["applicant"]);
    let c = &got["contributions"];
    assert_eq!(c["method"], "shapley_interventional");
    assert_eq!(c["space"], "probability");
    assert!(c.get("estimate").is_none());
    let p = got["probability_of_default"].as_f64().unwrap();
    assert!((p - row["onnxruntime"].as_f64().unwrap()).abs() <= 2e-7);
    for (f, want) in c["fields"]
        .as_array()
        .unwrap()
        .iter()
        .zip(row["contributions"].as_array().unwrap())
    {
        assert!((f["contribution"].as_f64().unwrap() - want.as_f64().unwrap()).abs() <= 1e-6);
    }
}

#[test]
fn graph_options_are_refused_for_trees() {
    let dir = TempDir::new();
    let out = plumbline(&[
        "import",
        &format!("{FX}/random_forest.onnx"),
        "--spec",
        &format!("{FX}/spec.json"),
        "--reference",
        &format!("{FX}/complete.csv"),
        "--approximate",
        "--out",
        &dir.0.join("x.json").display().to_string(),
    ]);
    assert_eq!(out.status.code(), Some(2));
    assert!(text(&out.stderr).contains("--background and --approximate are for graph models"));
}
