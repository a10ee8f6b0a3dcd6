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
    // Requests are decided a block at a time: a tree ensemble explains a block's applicants
    // per pass over each tree. Each answer is the one the request gets alone.
    let mut block: Vec<(usize, usize, serde_json::Value)> = Vec::with_capacity(BLOCK);
    // Line of the current request, counted as we go (not rescanned per request).
    let (mut counted_to, mut line_base) = (0usize, 1usize);
    let mut stream = serde_json::Deserializer::from_str(&text).into_iter::<serde_json::Value>();
    loop {
        let start = stream.byte_offset();
        let request = match stream.next() {
            None => break,
            Some(Ok(v)) => v,
            Some(Err(e)) => {
                if !decide_block(&model, &mut block, &mut out, &mut status) {
                    return EXIT_FAILURE;
                }
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
        block.push((count, line, request));
        if block.len() == BLOCK && !decide_block(&model, &mut block, &mut out, &mut status) {
            return EXIT_FAILURE;
        }
    }
    if !decide_block(&model, &mut block, &mut out, &mut status) {
        return EXIT_FAILURE;
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

/// Requests decided together.
const BLOCK: usize = 256;

/// Decides and writes the block's requests in order (decisions on stdout, problems on stderr,
/// naming the request and its line), then empties it; false if stdout cannot be written.
fn decide_block(
    model: &crate::LoadedModel,
    block: &mut Vec<(usize, usize, serde_json::Value)>,
    out: &mut impl Write,
    status: &mut i32,
) -> bool {
    let requests: Vec<serde_json::Value> = block.iter_mut().map(|(_, _, r)| r.take()).collect();
    let decided = crate::decide::decide_requests(model, &requests);
    for ((count, line, _), result) in block.drain(..).zip(decided) {
        match result {
            Ok(decision) => {
                let json = serde_json::to_string(&decision).expect("decisions serialise");
                if writeln!(out, "{json}").is_err() {
                    return false;
                }
            }
            Err(e) => {
                for f in &e.errors {
                    eprintln!(
                        "error: request {count} (line {line}): {}: {} [{}]",
                        f.field, f.message, f.rule
                    );
                }
                *status = EXIT_BAD_INPUT;
            }
        }
    }
    true
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
