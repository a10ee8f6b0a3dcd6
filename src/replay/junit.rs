//! JUnit XML for CI systems: one test case per replayed decision, a failure for each change.

use super::{Change, Report};

fn escape(s: &str) -> String {
    s.chars()
        .map(|c| match c {
            '&' => "&amp;".to_string(),
            '<' => "&lt;".to_string(),
            '>' => "&gt;".to_string(),
            '"' => "&quot;".to_string(),
            '\'' => "&apos;".to_string(),
            c if (c as u32) < 0x20 && !matches!(c, '\n' | '\t' | '\r') => " ".to_string(),
            c => c.to_string(),
        })
        .collect()
}

/// The report as a JUnit XML document. `all` names every case in source order, so unchanged
/// ones appear as passing tests.
pub fn junit_xml(report: &Report, all: &[(String, String)]) -> String {
    let failures = report.compared - report.unchanged - report.errors;
    let mut s = format!(
        "<?xml version=\"1.0\" encoding=\"UTF-8\"?>\n<testsuite name=\"plumbline replay\" tests=\"{}\" failures=\"{}\" errors=\"{}\">\n",
        report.compared, failures, report.errors
    );
    let changed: std::collections::HashMap<&str, &super::Compared> = report
        .changes
        .iter()
        .map(|c| (c.name.as_str(), c))
        .collect();
    for (name, application_id) in all {
        let case = format!(
            "  <testcase classname=\"replay.{}\" name=\"{}\"",
            escape(&report.against),
            escape(&format!("{name} ({application_id})"))
        );
        match changed.get(name.as_str()) {
            None => s.push_str(&format!("{case}/>\n")),
            Some(c) => {
                let tag = if c.change == Change::Error {
                    "error"
                } else {
                    "failure"
                };
                let kind = c.change.name();
                s.push_str(&format!(
                    "{case}>\n    <{tag} type=\"{kind}\" message=\"{}\"/>\n  </testcase>\n",
                    escape(&c.describe())
                ));
            }
        }
    }
    s.push_str("</testsuite>\n");
    s
}
