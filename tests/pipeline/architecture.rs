//! The code map in ARCHITECTURE.md, checked against the code (in the manner of rust-analyzer's
//! tidy test): every module under src/ is in the map, imports only what its "may call" cell
//! names (besides its own submodules and the modules it sits in), and opens with a `//!`
//! comment that says what it is for. A new module or import fails here until the map says so.

use std::collections::{BTreeMap, BTreeSet};
use std::path::{Path, PathBuf};

/// Items `lib.rs` re-exports at the crate root, and the module each comes from.
const ROOT_ITEMS: &[(&str, &str)] = &[
    ("LoadedModel", "artifact"),
    ("ArtifactError", "artifact"),
    ("decide_request", "decide"),
    ("Decision", "decide"),
    ("InputError", "features"),
    ("VERSION", ""),
];

/// What a `super::` path above the crate root resolves to (reported as unresolved).
const ABOVE_ROOT: &str = "<above the crate root>";

/// The file's code split at its top-level inline modules (`mod tests { ... }`, as rustfmt lays
/// them out), each with the module its `super` is resolved from.
fn segments(module: &str, code: &str) -> Vec<(String, String)> {
    let mut out = vec![(module.to_string(), String::new())];
    let mut inline: Option<usize> = None;
    for line in code.lines() {
        let opening = line
            .strip_prefix("pub(crate) ")
            .or_else(|| line.strip_prefix("pub "))
            .unwrap_or(line)
            .strip_prefix("mod ")
            .and_then(|rest| rest.strip_suffix(" {"));
        if let (None, Some(name)) = (inline, opening) {
            let path = [module, name]
                .iter()
                .filter(|p| !p.is_empty())
                .copied()
                .collect::<Vec<_>>()
                .join("::");
            out.push((path, String::new()));
            inline = Some(out.len() - 1);
            continue;
        }
        if inline.is_some() && line == "}" {
            inline = None;
            continue;
        }
        let at = inline.unwrap_or(0);
        out[at].1.push_str(line);
        out[at].1.push('\n');
    }
    out
}

fn root() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

/// Every `.rs` file under `dir`, sorted.
fn rust_files(dir: &Path, out: &mut Vec<PathBuf>) {
    let mut entries: Vec<_> = std::fs::read_dir(dir)
        .unwrap()
        .map(|e| e.unwrap().path())
        .collect();
    entries.sort();
    for p in entries {
        if p.is_dir() {
            rust_files(&p, out);
        } else if p.extension().is_some_and(|e| e == "rs") {
            out.push(p);
        }
    }
}

/// `src/api/batch.rs` -> `api::batch`, `src/api/mod.rs` -> `api`, `src/lib.rs` -> ``.
fn module_of(file: &Path) -> String {
    let rel = file.strip_prefix(root().join("src")).unwrap();
    let mut parts: Vec<String> = rel
        .iter()
        .map(|p| p.to_string_lossy().into_owned())
        .collect();
    let last = parts.pop().unwrap();
    let stem = last.trim_end_matches(".rs");
    if !matches!(stem, "mod" | "lib" | "main") {
        parts.push(stem.to_string());
    }
    parts.join("::")
}

/// The code map: module -> the modules its "may call" cell names (`—` names none). A cell's
/// entries are its back-quoted paths; words in parentheses say which parts and are not checked.
fn code_map() -> BTreeMap<String, Vec<String>> {
    let text = std::fs::read_to_string(root().join("ARCHITECTURE.md")).unwrap();
    let start = text
        .find("## Code map")
        .expect("ARCHITECTURE.md has a code map");
    let mut map = BTreeMap::new();
    for line in text[start..].lines().skip_while(|l| !l.starts_with('|')) {
        if !line.starts_with('|') {
            break;
        }
        let cells: Vec<&str> = line.trim_matches('|').split('|').map(str::trim).collect();
        if cells[0] == "module" || cells[0].starts_with("---") {
            continue;
        }
        assert_eq!(
            cells.len(),
            3,
            "a code-map row must have three cells: {line}"
        );
        let calls = quoted(&without_parentheses(cells[2]));
        for module in quoted(cells[0]) {
            assert!(
                map.insert(module.clone(), calls.clone()).is_none(),
                "`{module}` has two rows in the code map"
            );
        }
    }
    map
}

fn without_parentheses(s: &str) -> String {
    let mut depth = 0;
    s.chars()
        .filter(|&c| {
            match c {
                '(' => depth += 1,
                ')' => depth -= 1,
                _ => return depth == 0,
            }
            false
        })
        .collect()
}

/// The back-quoted words of a cell, with a trailing `::*` dropped.
fn quoted(cell: &str) -> Vec<String> {
    cell.split('`')
        .skip(1)
        .step_by(2)
        .map(|s| s.trim_end_matches("::*").to_string())
        .collect()
}

/// The source without comments (line comments, doc comments) and string literals' contents.
fn code_only(source: &str) -> String {
    let mut out = String::new();
    for line in source.lines() {
        let mut in_string = false;
        let mut prev = ' ';
        let mut kept = String::new();
        let chars: Vec<char> = line.chars().collect();
        let mut i = 0;
        while i < chars.len() {
            let c = chars[i];
            if !in_string && c == '/' && chars.get(i + 1) == Some(&'/') {
                break;
            }
            if c == '"' && prev != '\\' && !(prev == '\'' && chars.get(i + 1) == Some(&'\'')) {
                in_string = !in_string;
                kept.push('"');
            } else if !in_string {
                kept.push(c);
            }
            prev = if prev == '\\' && c == '\\' { ' ' } else { c };
            i += 1;
        }
        out.push_str(&kept);
        out.push('\n');
    }
    out
}

/// Every path the code names from `crate::` or `super::`, made absolute: `use` trees expanded
/// (`super::{a, b::c}` is `a` and `b::c`), each as its segments.
fn references(module: &str, code: &str) -> Vec<Vec<String>> {
    let here: Vec<String> = module
        .split("::")
        .filter(|s| !s.is_empty())
        .map(String::from)
        .collect();
    // `super` from `api::batch` (api/batch.rs) is `api`; from `api` (api/mod.rs) the root.
    let parent_of_file = |ups: usize| -> Option<Vec<String>> {
        (ups <= here.len()).then(|| here[..here.len() - ups].to_vec())
    };
    let chars: Vec<char> = code.chars().collect();
    let mut found = Vec::new();
    let mut i = 0;
    while i < chars.len() {
        let boundary = i == 0
            || !(chars[i - 1].is_alphanumeric() || chars[i - 1] == '_' || chars[i - 1] == ':');
        let rest: String = chars[i..chars.len().min(i + 7)].iter().collect();
        let (prefix, base) = if boundary && rest.starts_with("crate::") {
            (7, Some(Vec::new()))
        } else if boundary && rest.starts_with("super::") {
            let mut ups = 0;
            let mut j = i;
            while chars[j..].iter().take(7).collect::<String>() == "super::" {
                ups += 1;
                j += 7;
            }
            let base = parent_of_file(ups);
            (j - i, base)
        } else {
            i += 1;
            continue;
        };
        // A `super` above the crate root cannot be resolved: reported, never skipped.
        let base = base.unwrap_or_else(|| vec![ABOVE_ROOT.to_string()]);
        let (paths, used) = use_tree(&chars[i + prefix..]);
        for p in paths {
            let mut full = base.clone();
            full.extend(p);
            found.push(full);
        }
        i += prefix + used.max(1);
    }
    found
}

/// A path or `use` tree at the start of `chars`: its paths (as segments) and the characters read.
fn use_tree(chars: &[char]) -> (Vec<Vec<String>>, usize) {
    let mut i = 0;
    let mut prefix = Vec::new();
    loop {
        while i < chars.len() && chars[i].is_whitespace() {
            i += 1;
        }
        if i < chars.len() && chars[i] == '{' {
            i += 1;
            let mut all = Vec::new();
            loop {
                while i < chars.len() && (chars[i].is_whitespace() || chars[i] == ',') {
                    i += 1;
                }
                if i >= chars.len() || chars[i] == '}' {
                    i += 1;
                    break;
                }
                let (inner, used) = use_tree(&chars[i..]);
                for p in inner {
                    let mut full = prefix.clone();
                    full.extend(p);
                    all.push(full);
                }
                i += used.max(1);
            }
            return (all, i);
        }
        let start = i;
        while i < chars.len() && (chars[i].is_alphanumeric() || chars[i] == '_') {
            i += 1;
        }
        if start == i {
            return (vec![prefix], i);
        }
        prefix.push(chars[start..i].iter().collect());
        if chars.get(i) == Some(&':') && chars.get(i + 1) == Some(&':') {
            i += 2;
        } else {
            return (vec![prefix], i);
        }
    }
}

/// The module a path reaches: its longest prefix that is a module, or what a root re-export
/// stands for. `None` for the crate root itself.
fn target(path: &[String], modules: &BTreeSet<String>) -> Option<String> {
    if path.is_empty() {
        return None;
    }
    if let Some((_, m)) = ROOT_ITEMS.iter().find(|(item, _)| *item == path[0]) {
        return (!m.is_empty()).then(|| m.to_string());
    }
    (1..=path.len())
        .rev()
        .map(|n| path[..n].join("::"))
        .find(|m| modules.contains(m))
}

fn within(module: &str, area: &str) -> bool {
    module == area || module.starts_with(&format!("{area}::"))
}

#[test]
fn every_source_file_says_what_it_is_for() {
    let mut files = Vec::new();
    rust_files(&root().join("src"), &mut files);
    let lacking: Vec<String> = (files.iter())
        .filter(|f| {
            let text = std::fs::read_to_string(f).unwrap();
            !text.trim_start().starts_with("//!")
        })
        .map(|f| f.strip_prefix(root()).unwrap().display().to_string())
        .collect();
    assert!(
        lacking.is_empty(),
        "files without a `//!` opening: {lacking:?}"
    );
}

#[test]
fn modules_call_only_what_the_code_map_allows() {
    let mut files = Vec::new();
    rust_files(&root().join("src"), &mut files);
    let modules: BTreeSet<String> = files.iter().map(|f| module_of(f)).collect();
    let map = code_map();
    for listed in map.keys() {
        assert!(
            modules.contains(listed),
            "ARCHITECTURE.md maps `{listed}`, which is not a module of src/"
        );
    }
    let mut unmapped = BTreeSet::new();
    let mut breaches = BTreeSet::new();
    let mut unresolved = BTreeSet::new();
    for file in &files {
        let module = module_of(file);
        if module.is_empty() || file.ends_with("main.rs") {
            continue; // lib.rs and main.rs: the crate's roots wire every module.
        }
        // The row of the module, or of the nearest module it sits in.
        let Some((row, calls)) = (map.iter())
            .filter(|(m, _)| within(&module, m))
            .max_by_key(|(m, _)| m.len())
        else {
            unmapped.insert(module.clone());
            continue;
        };
        let code = code_only(&std::fs::read_to_string(file).unwrap());
        let paths = (segments(&module, &code).into_iter())
            .flat_map(|(from, code)| references(&from, &code));
        for path in paths {
            let Some(t) = target(&path, &modules) else {
                let root_item = path
                    .first()
                    .is_some_and(|p| ROOT_ITEMS.iter().any(|(i, _)| i == p));
                if !path.is_empty() && !root_item {
                    unresolved.insert(format!("{module}: `{}`", path.join("::")));
                }
                continue;
            };
            let allowed = within(&t, &module) // its own submodules
                || within(&module, &t) // the modules it sits in
                || within(&t, row) // its row's other parts
                || calls.iter().any(|c| within(&t, c));
            if !allowed {
                breaches.insert(format!("{module} (row `{row}`) uses `{t}`"));
            }
        }
    }
    assert!(
        unresolved.is_empty(),
        "paths the checker cannot resolve to a module (extend ROOT_ITEMS for a new root \
         re-export): {unresolved:?}"
    );
    assert!(
        unmapped.is_empty() && breaches.is_empty(),
        "modules missing from ARCHITECTURE.md's code map: {unmapped:?}\n\
         imports outside the code map's \"may call\" cells (fix the import, or the map if the \
         dependency is right):\n{}",
        breaches.into_iter().collect::<Vec<_>>().join("\n")
    );
}

/// The checker itself: a `use` tree is expanded and resolved as the compiler would.
#[test]
fn references_are_read_as_the_compiler_reads_them() {
    let code = code_only(
        "use super::{body::read_json, problem::Problem};\nuse crate::records::{self, Outcome};\n// crate::cli::run\nlet s = \"crate::tls\"; crate::exit::FAILURE",
    );
    let got: Vec<String> = references("api::batch", &code)
        .iter()
        .map(|p| p.join("::"))
        .collect();
    assert_eq!(
        got,
        [
            "api::body::read_json",
            "api::problem::Problem",
            "records::self",
            "records::Outcome",
            "exit::FAILURE"
        ]
    );
    // `super` inside an inline test module is resolved from that module; above the root is
    // reported.
    let split = segments(
        "artifact::canonical",
        "use a;\nmod tests {\n    use super::super::digest;\n}\n",
    );
    assert_eq!(split[1].0, "artifact::canonical::tests");
    assert_eq!(
        references(&split[1].0, &split[1].1),
        [vec!["artifact".to_string(), "digest".to_string()]]
    );
    assert_eq!(references("tls", "use super::super::x;")[0][0], ABOVE_ROOT);
    let from_dir = references("api", "use super::tls;");
    assert_eq!(from_dir, [vec!["tls".to_string()]]);
}
