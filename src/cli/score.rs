//! `plumbline score`: decisions as JSON lines on stdout, problems on stderr.

use super::{load, EXIT_BAD_INPUT, EXIT_FAILURE};
use crate::artifact::spec::Population;
use std::io::{Read, Write};
use std::path::Path;

pub fn run(model: &Path, input: Option<&Path>, reference: Option<Population>) -> i32 {
    let mut model = match load(model) {
        Ok(m) => m,
        Err(code) => return code,
    };
    if let Some(population) = reference {
        match model.explained_against(population) {
            Some(m) => model = m,
            None => {
                let name = population.name();
                eprintln!("error: --reference {name}: the artifact carries no such reference population (it has {})", carried(&model));
                return EXIT_BAD_INPUT;
            }
        }
    }
    let mut text = String::new();
    let read = match input {
        None => std::io::stdin().read_to_string(&mut text).map(|_| ()),
        Some(p) if p.as_os_str() == "-" => std::io::stdin().read_to_string(&mut text).map(|_| ()),
        Some(p) => std::fs::read_to_string(p).map(|t| text = t),
    };
    if let Err(e) = read {
        eprintln!("error: cannot read input: {e}");
        return EXIT_FAILURE;
    }
    let stdout = std::io::stdout();
    let mut out = std::io::BufWriter::new(stdout.lock());
    let mut status = 0;
    let mut count = 0;
    // Line of the current request, counted as we go (not rescanned per request).
    let (mut counted_to, mut line_base) = (0usize, 1usize);
    let mut stream = serde_json::Deserializer::from_str(&text).into_iter::<serde_json::Value>();
    loop {
        let start = stream.byte_offset();
        let request = match stream.next() {
            None => break,
            Some(Ok(v)) => v,
            Some(Err(e)) => {
                eprintln!(
                    "error: request {}: malformed JSON at line {}, column {}: {e}",
                    count + 1,
                    e.line(),
                    e.column()
                );
                status = EXIT_BAD_INPUT;
                break;
            }
        };
        count += 1;
        line_base += text[counted_to..start].matches('\n').count();
        counted_to = start;
        let line = line_base + leading_newlines(&text[start..]);
        match crate::decide_request(&model, &request) {
            Ok(decision) => {
                let json = serde_json::to_string(&decision).expect("decisions serialise");
                if writeln!(out, "{json}").is_err() {
                    return EXIT_FAILURE;
                }
            }
            Err(e) => {
                for f in &e.errors {
                    eprintln!(
                        "error: request {count} (line {line}): {}: {} [{}]",
                        f.field, f.message, f.rule
                    );
                }
                status = EXIT_BAD_INPUT;
            }
        }
    }
    if count == 0 && status == 0 {
        eprintln!("error: no request in input");
        status = EXIT_BAD_INPUT;
    }
    if out.flush().is_err() {
        return EXIT_FAILURE;
    }
    status
}

fn leading_newlines(s: &str) -> usize {
    s.chars()
        .take_while(|c| c.is_whitespace())
        .filter(|&c| c == '\n')
        .count()
}

/// The reference populations an artifact carries, for error messages.
fn carried(model: &crate::LoadedModel) -> String {
    std::iter::once(model.reference.population.name())
        .chain(
            model
                .alternate
                .iter()
                .map(|a| a.reference.population.name()),
        )
        .collect::<Vec<_>>()
        .join(" and ")
}
