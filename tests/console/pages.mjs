// The monitoring pages (stability, back-test, reason trends) in a real browser: Debian's
// Chromium through playwright-core. Run by tests/service/console.rs against a served store:
//
//   node tests/console/pages.mjs BASE_URL ARTIFACTS_DIR KEY PATH...
//
// Each page must load with no script and no error, draw every chart inside its own frame with
// something in it, keep every chart label inside its chart, and print on A4 and Letter with its
// title and caution readable (pdftotext). Screenshots and PDFs go to ARTIFACTS_DIR.
import { chromium } from "playwright-core";
import { execFileSync } from "node:child_process";
import { mkdirSync, writeFileSync } from "node:fs";
import { join } from "node:path";

const [base, artifacts, key, ...paths] = process.argv.slice(2);
mkdirSync(artifacts, { recursive: true });

function check(ok, what) {
  if (!ok) {
    console.error(`page check failed: ${what}`);
    process.exit(1);
  }
  console.log(`ok: ${what}`);
}

const browser = await chromium.launch({ executablePath: "/usr/bin/chromium", args: ["--no-sandbox"] });
const context = await browser.newContext({ extraHTTPHeaders: { Authorization: `Bearer ${key}` } });
for (const [n, path] of paths.entries()) {
  const page = await context.newPage();
  const errors = [];
  page.on("pageerror", (e) => errors.push(String(e)));
  // A failed load is reported by its response (the console's message names no URL); the
  // browser's own favicon request is not the page's.
  page.on("console", (m) => m.type() === "error" && !m.text().startsWith("Failed to load resource") && errors.push(m.text()));
  page.on("response", (r) => r.status() >= 400 && !r.url().endsWith("/favicon.ico") && errors.push(`${r.status()} ${r.url()}`));
  const res = await page.goto(`${base}${path}`);
  check(res.status() === 200, `${path} answers 200`);
  const title = await page.title();
  check(title.length > 0, `${path} has a title: ${title}`);
  check((await page.locator("script").count()) === 0, `${title}: no script`);
  const charts = await page.evaluate(() =>
    [...document.querySelectorAll("svg")].map((svg) => {
      const frame = svg.getBoundingClientRect();
      const marks = svg.querySelectorAll("rect, circle, polyline, path, line").length;
      const outside = [...svg.querySelectorAll("text")]
        .map((t) => [t.textContent, t.getBoundingClientRect()])
        .filter(([, b]) => b.width > 0 && (b.left < frame.left - 1 || b.right > frame.right + 1 || b.top < frame.top - 1 || b.bottom > frame.bottom + 1))
        .map(([text]) => text);
      return { label: svg.getAttribute("aria-label"), width: frame.width, height: frame.height, marks, outside };
    }),
  );
  check(charts.length > 0, `${title}: ${charts.length} charts`);
  for (const c of charts) {
    check(c.width > 50 && c.height > 50 && c.marks >= 2, `${title}: chart "${c.label}" is drawn (${c.marks} marks)`);
    check(c.outside.length === 0, `${title}: chart "${c.label}" keeps its labels inside (outside: ${c.outside.join(" | ")})`);
  }
  check(errors.length === 0, `${title}: no page errors (${errors.join("; ")})`);
  await page.screenshot({ path: join(artifacts, `page-${n}.png`), fullPage: true });
  for (const format of ["A4", "Letter"]) {
    const pdf = join(artifacts, `page-${n}-${format}.pdf`);
    writeFileSync(pdf, await page.pdf({ format, printBackground: true }));
    const text = execFileSync("pdftotext", ["-layout", pdf, "-"]).toString();
    check(text.includes("Caution"), `${title}: the ${format} print carries the caution`);
    const heading = (await page.locator("h1").textContent()).trim();
    check(text.replace(/\s+/g, " ").includes(heading.split(":")[0]), `${title}: the ${format} print carries its heading`);
  }
  await page.close();
}
await browser.close();
console.log("page checks passed");
