// The review console driven in a real browser: Debian's Chromium through playwright-core (no
// browser is downloaded). Run by tests/service/console.rs against a served, filled store:
//
//   node tests/console/check.mjs BASE_URL ARTIFACTS_DIR GROUPS_CSV REPLAY_JSON
//
// Every check names what it expected; the first failure exits 1 with the reason. Screenshots
// and the printed notices go to ARTIFACTS_DIR.
import { chromium } from "playwright-core";
import { execFileSync } from "node:child_process";
import { mkdirSync, writeFileSync } from "node:fs";
import { join } from "node:path";

const [base, artifacts, groupsCsv, replayJson] = process.argv.slice(2);
const KEYS = {
  scoring: "fernhill-demo-scoring-key",
  review: "fernhill-demo-review-key",
  underwriting: "fernhill-demo-underwriting-key",
};
mkdirSync(artifacts, { recursive: true });

function check(ok, what) {
  if (!ok) {
    console.error(`console check failed: ${what}`);
    process.exit(1);
  }
  console.log(`ok: ${what}`);
}

async function apiGet(path, key) {
  const res = await fetch(`${base}${path}`, { headers: { Authorization: `Bearer ${key}` } });
  return res.json();
}

// 1. Without a key the console's responses carry no applicant data, and every one carries the
//    policy: no inline script, nothing from elsewhere, no framing.
const known = (await apiGet("/v1/decisions?limit=5", KEYS.review)).decisions;
check(known.length > 0, "the store holds decisions to look at");
for (const path of ["/console/", "/console/app.js", "/console/app.css", "/console/index.html"]) {
  const res = await fetch(`${base}${path}`);
  const text = await res.text();
  const csp = res.headers.get("content-security-policy") || "";
  check(res.status === 200, `${path} is served (${res.status})`);
  check(csp.includes("script-src 'self'") && !csp.includes("unsafe-inline") && csp.includes("frame-ancestors 'none'"), `${path} carries a strict policy: ${csp}`);
  check(!known.some((d) => text.includes(d.application_id) || text.includes(d.decision_id)), `${path} holds no applicant data without a key`);
}
const redirect = await fetch(`${base}/console`, { redirect: "manual" });
check(redirect.status === 308 && redirect.headers.get("location") === "/console/", "/console redirects to /console/");

const browser = await chromium.launch({ executablePath: process.env.CHROMIUM || "/usr/bin/chromium", args: ["--no-sandbox"] });
const context = await browser.newContext({ viewport: { width: 1280, height: 900 }, acceptDownloads: false });
const page = await context.newPage();
const refused = [];
// Policy refusals and script errors fail the run; the 403 of the scoring key's probe is expected.
page.on("console", (m) => {
  if (m.type() === "error" && !/status of 40[13]/.test(m.text())) refused.push(m.text());
});
page.on("pageerror", (e) => refused.push(String(e)));

async function signIn(role) {
  await page.goto(`${base}/console/#/signin`);
  await page.getByLabel("API key").fill(KEYS[role]);
  await page.getByRole("button", { name: "Sign in" }).click();
}

async function labelled() {
  // Every form control has a label a screen reader announces.
  return page.evaluate(() => [...document.querySelectorAll("input, select, textarea")]
    .filter((c) => c.type !== "hidden" && !(c.labels && c.labels.length) && !c.getAttribute("aria-label"))
    .map((c) => c.name || c.id));
}

// 2. A scoring key is refused, and keeps nothing.
await signIn("scoring");
await page.getByRole("heading", { name: "This key cannot read records" }).waitFor();
check(await page.evaluate(() => sessionStorage.length === 0), "a refused key is not kept");
await page.screenshot({ path: join(artifacts, "console-refused.png") });

// 3. Review: search, open a decline, compare with the API.
await signIn("review");
await page.getByRole("heading", { name: "Search", exact: true }).waitFor();
check(!(await page.evaluate(() => location.href)).includes(KEYS.review), "the key is never in the URL");
check((await labelled()).length === 0, `every search control is labelled (${await labelled()})`);
await page.getByLabel("Outcome").selectOption("decline");
await page.getByRole("button", { name: "Search" }).click();
await page.waitForFunction(() => location.hash.includes("outcome=decline"));
// The filtered page replaces the first one: wait until every row shown is a decline.
await page.waitForFunction(() => {
  const rows = [...document.querySelectorAll("table tbody tr")];
  return rows.length > 0 && rows.every((r) => r.cells[2].textContent.trim() === "decline");
});
const firstRow = page.locator("table tbody tr").first();
await page.screenshot({ path: join(artifacts, "console-search-1280.png"), fullPage: true });
await page.setViewportSize({ width: 800, height: 900 });
await page.screenshot({ path: join(artifacts, "console-search-800.png"), fullPage: true });
const wide = await page.evaluate(() => document.documentElement.scrollWidth);
check(wide <= 800, `the search page fits 800 px (${wide} px wide)`);
await page.setViewportSize({ width: 1280, height: 900 });
await firstRow.getByRole("link").click();
await page.waitForFunction(() => location.hash.startsWith("#/decision/"));
const id = (await page.evaluate(() => location.hash)).split("/")[2];
const record = await apiGet(`/v1/decisions/${id}`, KEYS.review);
check(record.outcome === "decline", `the opened decision ${id} is a decline`);
await page.getByRole("heading", { name: "Principal reasons", exact: true }).waitFor();
const shownReasons = await page.locator("table[aria-label='Principal reasons'] tbody tr").evaluateAll((rows) =>
  rows.map((r) => [...r.cells].map((c) => c.textContent)));
const apiReasons = record.response.reasons;
check(shownReasons.length === apiReasons.length, `${apiReasons.length} principal reasons shown`);
apiReasons.forEach((r, i) => {
  check(shownReasons[i][0] === String(r.rank) && shownReasons[i][1] === r.code && shownReasons[i][2] === r.text,
    `reason ${i + 1} is ${r.code}, "${r.text}", in the API's order`);
});
const bars = await page.locator("svg.chart rect[data-field]").evaluateAll((rs) =>
  rs.map((r) => ({ field: r.dataset.field, c: Number(r.dataset.contribution), side: r.dataset.side, w: Number(r.getAttribute("width")) })));
const fields = record.response.contributions.fields;
check(bars.length === fields.length, `one bar per field (${bars.length} of ${fields.length})`);
for (const f of fields) {
  const bar = bars.find((b) => b.field === f.field);
  check(bar && Math.abs(bar.c - f.contribution) < 1e-12, `the ${f.field} bar holds the API's contribution ${f.contribution}`);
  check(bar.side === (f.contribution > 0 ? "adverse" : "favourable"), `the ${f.field} bar is on the ${bar.side} side`);
}
const sum = fields.reduce((a, f) => a + f.contribution, 0);
const c = record.response.contributions;
check(Math.abs(c.base_value + sum - c.output) < 1e-9, "the bars run from the base value to the output");
const marks = await page.locator("svg.chart line[data-kind]").evaluateAll((ls) => ls.map((l) => [l.dataset.kind, Number(l.dataset.value)]));
check(marks.some(([k, v]) => k === "base" && v === c.base_value) && marks.some(([k, v]) => k === "output" && v === c.output), "the chart marks the base value and the output");
await page.screenshot({ path: join(artifacts, "console-decision.png"), fullPage: true });

// 4. The notice content, printed to PDF on A4 and Letter, read back as text.
await page.getByRole("link", { name: "Adverse-action content" }).click();
await page.getByRole("heading", { name: "Adverse-action content", exact: true }).waitFor();
const notice = await apiGet(`/v1/decisions/${id}/adverse-action`, KEYS.review);
for (const format of ["A4", "Letter"]) {
  const pdf = join(artifacts, `console-notice-${format}.pdf`);
  await page.emulateMedia({ media: "print" });
  writeFileSync(pdf, await page.pdf({ format, printBackground: false }));
  const text = execFileSync("pdftotext", ["-layout", pdf, "-"]).toString().replace(/\s+/g, " ");
  check(text.includes("Content for the lender's own notice wording"), `the ${format} PDF says it is content for the lender's notice`);
  for (const r of notice.principal_reasons) check(text.includes(r.text), `the ${format} PDF lists "${r.text}"`);
  check(text.includes(String(notice.credit_score.score)) && text.includes(`${notice.credit_score.range.min} to ${notice.credit_score.range.max}`), `the ${format} PDF discloses the score and its range`);
  check(text.includes(notice.model.sha256.slice(0, 16)), `the ${format} PDF names the model's digest`);
  check(!text.includes("Sign out") && !text.includes("Fair-lending screening"), `the ${format} PDF leaves out the console's navigation`);
  check(text.includes("decision support"), `the ${format} PDF carries the caution`);
}
await page.emulateMedia({ media: "screen" });

// 5. A screening report from a CSV file: the demo's tilted group is flagged.
await page.getByRole("link", { name: "Fair-lending screening" }).click();
await page.getByLabel("Group membership (CSV)").setInputFiles(groupsCsv);
await page.getByLabel("Dimension name").fill("synthetic_group");
check((await labelled()).length === 0, "every screening control is labelled");
await page.getByRole("button", { name: "Build the report" }).click();
const frame = page.frameLocator("iframe.report");
await frame.locator("h1").waitFor();
const reportText = await frame.locator("body").innerText();
check(reportText.includes("synthetic_group") && /below 4\/5|below_four_fifths|below four-fifths/i.test(reportText), "the report flags a group below four-fifths");
check((await frame.locator("svg").count()) >= 2, "the report draws its charts");
await page.screenshot({ path: join(artifacts, "console-screening.png"), fullPage: true });

// 6. The replay report file.
await page.getByRole("link", { name: "Replay report" }).click();
await page.getByLabel("A report of plumbline replay --json").setInputFiles(replayJson);
await page.getByRole("heading", { name: "Swap set (recorded outcome by new outcome)" }).waitFor();
const replayed = JSON.parse((await import("node:fs")).readFileSync(replayJson, "utf8"));
check((await page.locator("dl.facts").innerText()).includes(String(replayed.compared)), `the replay summary shows ${replayed.compared} compared`);
check((await page.locator("svg.chart rect[data-delta]").count()) === replayed.largest_movers.length, "one bar per largest mover");
await page.screenshot({ path: join(artifacts, "console-replay.png"), fullPage: true });

// 7. Underwriting: the referral queue, a final action recorded, shown on the decision at once.
await page.getByRole("button", { name: "Sign out" }).click();
check(await page.evaluate(() => sessionStorage.length === 0), "signing out forgets the key");
await signIn("underwriting");
await page.getByRole("heading", { name: "Search", exact: true }).waitFor();
await page.getByRole("link", { name: "Referrals" }).click();
await page.getByRole("heading", { name: "Referrals awaiting a final action" }).waitFor();
const queue = await apiGet("/v1/decisions?final_action=pending&limit=100", KEYS.underwriting);
const shownQueue = await page.locator("table tbody tr").count();
check(shownQueue === queue.decisions.length && shownQueue > 0, `the queue shows the ${queue.decisions.length} pending referrals, oldest first`);
await page.locator("table tbody tr").first().getByRole("link", { name: "Record the final action" }).click();
await page.getByRole("heading", { name: /^Final action for/ }).waitFor();
const referral = queue.decisions[0];
check((await labelled()).length === 0, "every final-action control is labelled");
await page.getByRole("radio", { name: "decline", exact: true }).check();
const model = await apiGet(`/v1/models/${referral.model_id}`, KEYS.underwriting);
const code = model.decline_reasons[0].code;
await page.getByLabel("Reason 1 (for a decline)").selectOption(code);
await page.getByLabel("Note for the file (never in a notice)").fill("Income could not be verified.");
await page.screenshot({ path: join(artifacts, "console-final-action.png"), fullPage: true });
await page.getByRole("button", { name: "Record the final action" }).click();
await page.waitForFunction((id) => location.hash === `#/decision/${id}`, referral.decision_id);
// The decision page replaces the form: wait for its own headings (names match exactly).
await page.getByRole("heading", { name: `Decision for ${referral.application_id}`, exact: true }).waitFor();
await page.getByRole("heading", { name: "Final action", exact: true }).waitFor();
const finalText = await page.locator("main").innerText();
check(finalText.includes("final action: decline") && finalText.includes(code), "the decision shows the final action and its reason at once");
const after = await apiGet(`/v1/decisions/${referral.decision_id}`, KEYS.underwriting);
check(after.final_action && after.final_action.action === "decline" && after.final_action.decided_by === "demo-underwriting", "the final action is recorded by the underwriter");

check(refused.length === 0, `no script error or policy refusal in the browser (${refused.join(" | ")})`);
await browser.close();
console.log("console checks passed");
