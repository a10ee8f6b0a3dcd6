// plumbline review console. Plain JavaScript, no dependencies, no inline script (the page's
// Content-Security-Policy forbids it). Every value shown comes from the service's API with the
// key the person typed; text is set with textContent, never parsed as HTML. The key lives in
// sessionStorage for this tab only and goes out only as the Authorization header.
"use strict";

const KEY = "plumbline-console-key";
const SVGNS = "http://www.w3.org/2000/svg";
const view = () => document.getElementById("view");

// ---- small DOM helpers ------------------------------------------------------------------

function h(tag, attrs, ...children) {
  const el = document.createElement(tag);
  for (const [k, v] of Object.entries(attrs || {})) {
    if (v === null || v === undefined || v === false) continue;
    if (k === "class") el.className = v;
    else if (k.startsWith("on")) el.addEventListener(k.slice(2), v);
    else el.setAttribute(k, v === true ? "" : String(v));
  }
  for (const c of children.flat()) {
    if (c === null || c === undefined || c === false) continue;
    el.append(c instanceof Node ? c : document.createTextNode(String(c)));
  }
  return el;
}

function s(tag, attrs, ...children) {
  const el = document.createElementNS(SVGNS, tag);
  for (const [k, v] of Object.entries(attrs || {})) {
    if (v !== null && v !== undefined) el.setAttribute(k, String(v));
  }
  for (const c of children.flat()) {
    if (c === null || c === undefined) continue;
    el.append(c instanceof Node ? c : document.createTextNode(String(c)));
  }
  return el;
}

// Each navigation (and each sign-out) takes a number. An answer that arrives after the person has
// moved on is dropped by `api`, which throws `Stale`, so an old page never draws over a new one.
let navigation = 0;
class Stale extends Error {}

/// An event handler whose failures are shown (and whose stale answers are dropped quietly).
function guarded(handler) {
  return (ev) => handler(ev).catch((e) => {
    if (!(e instanceof Stale)) show("Something went wrong", h("div", { class: "problem", role: "alert" }, String(e.message || e)));
  });
}

function show(title, ...content) {
  const main = view();
  main.replaceChildren(h("h1", {}, title), ...content.filter((c) => c !== null && c !== undefined));
  document.title = `${title} · plumbline review console`;
  main.focus();
}

function facts(pairs) {
  return h("dl", { class: "facts" },
    pairs.filter(([, v]) => v !== undefined && v !== null && v !== "")
      .flatMap(([k, v]) => [h("dt", {}, k), h("dd", {}, v)]));
}

function table(headers, rows, opts = {}) {
  return h("table", { "aria-label": opts.label },
    h("thead", {}, h("tr", {}, headers.map((x) => h("th", { scope: "col", class: x.num ? "num" : null }, x.title || x)))),
    h("tbody", {}, rows.map((r) => h("tr", {}, r.map((c, i) => h("td", { class: headers[i].num ? "num" : null }, c))))));
}

const pct = (p) => (p === null || p === undefined ? "" : `${(100 * p).toFixed(2)}%`);
const fixed = (x, n = 4) => (typeof x === "number" ? x.toFixed(n) : "");

function outcomeBadge(o) {
  return h("span", { class: `outcome ${o}` }, o);
}

function problemBox(p) {
  const errors = (p.errors || []).map((e) => h("li", {}, `${e.field}: ${e.message} (${e.rule})`));
  return h("div", { class: "problem", role: "alert" },
    h("strong", {}, p.title || "The request failed"), " ", p.detail || "",
    errors.length ? h("ul", {}, errors) : null);
}

// ---- the API --------------------------------------------------------------------------

function key() {
  return sessionStorage.getItem(KEY);
}

async function api(path, opts = {}) {
  const at = navigation;
  let answer;
  try {
    answer = await request(path, opts);
  } catch (e) {
    answer = { status: 0, ok: false, body: { title: "The service could not be reached", detail: String(e.message || e) } };
  }
  if (navigation !== at) throw new Stale();
  return answer;
}

async function request(path, opts) {
  const headers = { Authorization: `Bearer ${opts.key || key()}` };
  if (opts.json !== undefined) headers["Content-Type"] = "application/json";
  const res = await fetch(path, {
    method: opts.method || "GET",
    headers,
    body: opts.json !== undefined ? JSON.stringify(opts.json) : undefined,
    cache: "no-store",
    credentials: "omit",
    referrerPolicy: "no-referrer",
  });
  const type = res.headers.get("content-type") || "";
  const body = type.includes("json") ? await res.json() : await res.text();
  if (res.status === 401 && !opts.key) {
    // The key stopped working (rotated or removed): sign in again.
    sessionStorage.removeItem(KEY);
    navigation += 1;
    signin("The service no longer accepts this key; sign in again.");
  }
  return { status: res.status, ok: res.ok, body };
}

/// A random id for a request's idempotency key (crypto.randomUUID exists only on secure pages).
function uuid() {
  if (crypto.randomUUID) return crypto.randomUUID();
  const b = crypto.getRandomValues(new Uint8Array(16));
  b[6] = (b[6] & 0x0f) | 0x40;
  b[8] = (b[8] & 0x3f) | 0x80;
  const x = [...b].map((v) => v.toString(16).padStart(2, "0")).join("");
  return `${x.slice(0, 8)}-${x.slice(8, 12)}-${x.slice(12, 16)}-${x.slice(16, 20)}-${x.slice(20)}`;
}

// ---- sign-in --------------------------------------------------------------------------

function signin(message) {
  document.getElementById("nav").hidden = true;
  const input = h("input", { id: "key", name: "key", type: "password", autocomplete: "off", required: true, spellcheck: "false" });
  const form = h("form", {
    class: "filters",
    onsubmit: guarded(async (ev) => {
      ev.preventDefault();
      const typed = input.value.trim();
      input.value = "";
      const probe = await api("/v1/decisions?limit=1", { key: typed });
      if (probe.status === 403) return refused();
      if (probe.status === 401) return signin("The service does not know this key.");
      if (!probe.ok) return signin(probe.body.detail || `The service answered ${probe.status}.`);
      sessionStorage.setItem(KEY, typed);
      if (location.hash === "#/search") route();
      else location.hash = "#/search";
    }),
  },
  h("label", { for: "key" }, "API key (review, underwriting or admin)", input),
  h("div", { class: "actions" }, h("button", { type: "submit", class: "primary" }, "Sign in")));
  show("Sign in", message ? h("div", { class: "problem", role: "alert" }, message) : null, form,
    h("p", { class: "note" }, "The key is kept in this browser tab only, sent as the Authorization header, and forgotten when you sign out or close the tab."));
}

function refused() {
  sessionStorage.removeItem(KEY);
  document.getElementById("nav").hidden = true;
  if (location.hash !== "#/refused") history.replaceState(null, "", "#/refused");
  show("This key cannot read records",
    h("p", {}, "It belongs to a role that decides applications (scoring) and may not read recorded decisions, adverse-action content or reports."),
    h("p", {}, "Sign in with a review, underwriting or admin key."),
    h("p", {}, h("a", { href: "#/signin" }, "Back to sign-in")));
}

// ---- search ---------------------------------------------------------------------------

const SEARCH_FIELDS = ["application_id", "from", "to", "outcome", "model_id", "model_version", "final_action"];

async function search(params) {
  const input = (name, label, type = "text") =>
    h("label", {}, label, h("input", { name, type, value: params.get(name) || "" }));
  const choice = (name, label, options) =>
    h("label", {}, label, h("select", { name },
      options.map(([v, t]) => h("option", { value: v, selected: (params.get(name) || "") === v }, t))));
  const form = h("form", {
    class: "filters",
    onsubmit: (ev) => {
      ev.preventDefault();
      const q = new URLSearchParams();
      for (const [k, v] of new FormData(ev.target)) if (v) q.set(k, v);
      location.hash = `#/search?${q}`;
    },
  },
  input("application_id", "Application id"),
  input("from", "Decided from (date)", "date"),
  input("to", "Decided up to (date, included)", "date"),
  choice("outcome", "Outcome", [["", "any"], ["approve", "approve"], ["refer", "refer"], ["decline", "decline"]]),
  input("model_id", "Model id"),
  input("model_version", "Model version"),
  input("reason", "Reason code (this page)"),
  choice("final_action", "Final action", [["", "any"], ["pending", "referred, none yet"], ["recorded", "recorded"], ["approve", "approved on review"], ["decline", "declined on review"], ["withdrawn", "withdrawn"]]),
  h("div", { class: "actions" }, h("button", { type: "submit", class: "primary" }, "Search")));

  const q = new URLSearchParams();
  for (const f of SEARCH_FIELDS) if (params.get(f)) q.set(f, params.get(f));
  if (params.get("cursor")) q.set("cursor", params.get("cursor"));
  q.set("limit", "50");
  const res = await api(`/v1/decisions?${q}`);
  if (!res.ok) return show("Search", form, problemBox(res.body));
  const reason = (params.get("reason") || "").trim().toUpperCase();
  const hits = res.body.decisions.filter((d) => !reason || d.reason_codes.includes(reason));
  const rows = hits.map((d) => [
    h("a", { href: `#/decision/${d.decision_id}` }, d.application_id),
    d.decided_at.replace("T", " ").slice(0, 19),
    outcomeBadge(d.outcome),
    pct(d.probability_of_default),
    String(d.score),
    `${d.model_id} ${d.model_version}`,
    d.reason_codes.join(", "),
    d.final_action ? d.final_action.action : "",
  ]);
  const next = new URLSearchParams(params);
  const pager = h("div", { class: "pager" },
    params.get("cursor") ? h("a", { href: `#/search?${withoutCursor(params)}` }, "First page") : null,
    res.body.next_cursor ? h("a", { href: `#/search?${(next.set("cursor", res.body.next_cursor), next)}` }, "Next page") : null);
  show("Search", form,
    h("p", { class: "note" }, `${hits.length} decision${hits.length === 1 ? "" : "s"} on this page, oldest first${reason ? `, with reason ${reason}` : ""}.`),
    table(["Application", "Decided (UTC)", "Outcome", { title: "Probability of default", num: true }, { title: "Score", num: true }, "Model", "Reason codes", "Final action"], rows, { label: "Decisions found" }),
    pager);
}

function withoutCursor(params) {
  const p = new URLSearchParams(params);
  p.delete("cursor");
  return p;
}

// ---- one decision ---------------------------------------------------------------------

async function decision(id) {
  const res = await api(`/v1/decisions/${encodeURIComponent(id)}`);
  if (!res.ok) return show("Decision", problemBox(res.body));
  const r = res.body;
  const d = r.response;
  const c = d.contributions;
  const missing = new Map((d.missing || []).map((m) => [m.field, m]));
  const given = (r.request && r.request.applicant) || {};
  const contribution = new Map(c.fields.map((f) => [f.field, f.contribution]));
  const inputs = Object.keys(given).sort().map((name) => [
    name,
    given[name] === null ? "(missing)" : String(given[name]),
    treatment(missing.get(name)),
    contribution.has(name) ? fixed(contribution.get(name)) : "not scored",
  ]);
  for (const [name, t] of missing) {
    if (!(name in given)) inputs.push([name, "(absent)", treatment(t), contribution.has(name) ? fixed(contribution.get(name)) : ""]);
  }
  const links = h("p", { class: "actions no-print" },
    r.outcome === "decline" || (r.outcome === "refer" && (!r.final_action || r.final_action.action === "decline"))
      ? h("a", { href: `#/notice/${r.decision_id}` }, "Adverse-action content") : null,
    r.outcome === "refer" && !r.final_action ? h("a", { href: `#/referrals/${r.decision_id}` }, "Record the final action") : null);
  show(`Decision for ${r.application_id}`,
    h("p", {}, outcomeBadge(r.outcome), " ", r.final_action ? `final action: ${r.final_action.action}` : ""),
    facts([
      ["Probability of default", `${pct(r.probability_of_default)} (${r.probability_of_default})`],
      ["Score", d.score_scale ? `${r.score} on ${d.score_scale.min}–${d.score_scale.max}` : String(r.score)],
      ["Model", `${r.model.id} version ${r.model.version}`],
      ["Model digest (SHA-256)", r.model.sha256],
      ["Received", r.received_at],
      ["Decided", r.decided_at],
      ["Decision id", r.decision_id],
      ["Requested by", r.requested_by],
      ["Idempotency key", r.idempotency_key],
    ]),
    links,
    h("h2", {}, "Principal reasons"),
    d.reasons.length
      ? table(["Rank", "Code", "Reason", "Source", { title: "Contribution", num: true }],
        d.reasons.map((x) => [String(x.rank), x.code, x.text, x.source.replace("_", " "), x.contribution === undefined ? "" : fixed(x.contribution)]),
        { label: "Principal reasons" })
      : h("p", {}, "None: the application was approved."),
    h("h2", {}, "Contributions"),
    h("p", { class: "note" }, `From the base value (${c.reference.label}) to the model output, field by field, in ${c.space.replace("_", "-")} (${c.method}). Hatched bars push toward default (adverse); solid bars push away from it.`),
    contributionChart(c),
    h("h2", {}, "Inputs as given"),
    table(["Field", "Value given", "Missing-value treatment", { title: "Contribution", num: true }], inputs, { label: "Inputs as given" }),
    h("h2", {}, "Rules fired"),
    d.rules_fired.length
      ? table(["Code", "Field", "Action"], d.rules_fired.map((x) => [x.code, x.field, x.action]), { label: "Rules fired" })
      : h("p", {}, "None."),
    h("h2", {}, "Final action"),
    r.final_action ? finalAction(r.final_action) : h("p", {}, r.outcome === "refer" ? "None recorded yet." : "The decision itself is the action taken."));
}

/// How a missing field was handled, as the decision says (`imputed` with its value, or
/// `tree_default`: each tree's missing side).
function treatment(m) {
  if (!m) return "";
  if (m.treatment === "imputed") return `missing: imputed ${JSON.stringify(m.value)}`;
  if (m.treatment === "tree_default") return "missing: each tree's missing side";
  return `missing: ${m.treatment}`;
}

function finalAction(f) {
  return h("div", {},
    facts([["Action", f.action], ["Recorded", f.decided_at], ["By", f.decided_by], ["Note", f.note]]),
    (f.reasons || []).length
      ? table(["Code", "Reason", "Source"], f.reasons.map((x) => [x.code, x.text, x.source]), { label: "Final action reasons" })
      : null);
}

/// A waterfall from the base value to the output: one row per field, largest first.
function contributionChart(c) {
  const fields = [...c.fields].sort((a, b) => Math.abs(b.contribution) - Math.abs(a.contribution) || a.field.localeCompare(b.field));
  const rowH = 24, left = 210, right = 90, width = 760, top = 28;
  const height = top + rowH * (fields.length + 2) + 30;
  let level = c.base_value;
  const steps = fields.map((f) => {
    const from = level;
    level += f.contribution;
    return { ...f, from, to: level };
  });
  const values = [c.base_value, c.output, ...steps.map((x) => x.to)];
  let lo = Math.min(...values), hi = Math.max(...values);
  if (hi - lo < 1e-9) { lo -= 1; hi += 1; }
  const pad = (hi - lo) * 0.05;
  lo -= pad; hi += pad;
  const x = (v) => left + ((v - lo) / (hi - lo)) * (width - left - right);
  const svg = s("svg", { class: "chart", role: "img", width, height, viewBox: `0 0 ${width} ${height}`,
    "aria-label": `Contributions from the base value ${c.base_value.toFixed(4)} to the output ${c.output.toFixed(4)}` },
  s("defs", {}, s("pattern", { id: "adverse-hatch", width: 6, height: 6, patternUnits: "userSpaceOnUse", patternTransform: "rotate(45)" },
    s("rect", { width: 6, height: 6, fill: "#f3e3dc" }), s("line", { x1: 0, y1: 0, x2: 0, y2: 6, stroke: "#7a2e12", "stroke-width": 3 }))));
  for (const t of ticks(lo, hi)) {
    svg.append(s("line", { class: "grid", x1: x(t), x2: x(t), y1: top - 6, y2: height - 26 }),
      s("text", { x: x(t), y: height - 10, "text-anchor": "middle" }, t.toFixed(2)));
  }
  const row = (i) => top + rowH * i;
  const marker = (i, label, v, kind) => {
    svg.append(s("text", { x: left - 8, y: row(i) + 16, "text-anchor": "end" }, label),
      s("line", { class: "axis", x1: x(v), x2: x(v), y1: row(i) + 2, y2: row(i) + rowH - 2, "stroke-width": 3, "data-kind": kind, "data-value": v }),
      s("text", { x: x(v) + 6, y: row(i) + 16 }, v.toFixed(4)));
  };
  marker(0, "base value", c.base_value, "base");
  steps.forEach((f, i) => {
    const adverse = f.contribution > 0;
    const x0 = x(Math.min(f.from, f.to)), x1 = x(Math.max(f.from, f.to));
    svg.append(s("text", { x: left - 8, y: row(i + 1) + 16, "text-anchor": "end" }, f.field),
      s("rect", { class: adverse ? "bar-adverse" : "bar-favour", x: x0, y: row(i + 1) + 4, width: Math.max(x1 - x0, 1), height: rowH - 8,
        "data-field": f.field, "data-contribution": f.contribution, "data-side": adverse ? "adverse" : "favourable" },
      s("title", {}, `${f.field}: ${f.contribution >= 0 ? "+" : ""}${f.contribution.toFixed(4)} (${adverse ? "toward default" : "away from default"})`)),
      s("text", { x: x1 + 6, y: row(i + 1) + 16 }, `${f.contribution >= 0 ? "+" : ""}${f.contribution.toFixed(3)}${adverse ? " adverse" : ""}`));
  });
  marker(fields.length + 1, "model output", c.output, "output");
  return svg;
}

function ticks(lo, hi) {
  const span = hi - lo;
  const step = Math.pow(10, Math.floor(Math.log10(span / 4)));
  const nice = [1, 2, 5, 10].map((m) => m * step).find((st) => span / st <= 6) || step * 10;
  const out = [];
  for (let t = Math.ceil(lo / nice) * nice; t <= hi + 1e-12; t += nice) out.push(Math.abs(t) < 1e-12 ? 0 : t);
  return out;
}

// ---- adverse-action content -----------------------------------------------------------

async function notice(id) {
  const res = await api(`/v1/decisions/${encodeURIComponent(id)}/adverse-action`);
  if (!res.ok) return show("Adverse-action content", problemBox(res.body), h("p", {}, h("a", { href: `#/decision/${id}` }, "Back to the decision")));
  const n = res.body;
  const cs = n.credit_score;
  show("Adverse-action content",
    h("p", { class: "marked" }, h("strong", {}, "Content for the lender's own notice wording. "),
      "This page lists what a notice must carry for this application; it is not a notice. The lender writes and sends the notice, in its own words, after compliance review."),
    h("p", { class: "actions no-print" }, h("button", { type: "button", class: "primary", onclick: () => window.print() }, "Print"), h("a", { href: `#/decision/${id}` }, "Back to the decision")),
    facts([
      ["Application", n.application_id],
      ["Decision date", n.decision_date],
      ["Decided at", n.decided_at],
      ["Outcome", n.outcome],
      ["Action taken", n.final_action ? "yes" : "no (referred for review)"],
      ["Note", n.action_note],
    ]),
    h("h2", {}, "Principal reasons (Regulation B, 12 CFR 1002.9(b)(2))"),
    h("ol", {}, n.principal_reasons.map((r) => h("li", {}, `${r.text} (${r.code})`))),
    h("h2", {}, "Credit score disclosure (FCRA, 15 U.S.C. 1681g(f))"),
    facts([
      ["Score", String(cs.score)],
      ["Range", cs.range ? `${cs.range.min} to ${cs.range.max}` : "not recorded with this decision"],
      ["Date", cs.date],
      ["Provided by", cs.provided_by],
    ]),
    h("p", {}, "Key factors that adversely affected the score:"),
    h("ol", {}, cs.key_factors.map((r) => h("li", {}, `${r.text} (${r.code})`))),
    h("h2", {}, "Model identity"),
    facts([["Model", `${n.model.id} version ${n.model.version}`], ["Digest (SHA-256)", n.model.sha256], ["Decision id", n.decision_id], ["Source", n.source]]),
    h("p", { class: "note" }, n.caution));
}

// ---- referrals ------------------------------------------------------------------------

async function referrals(params) {
  const q = new URLSearchParams({ final_action: "pending", limit: "100" });
  if (params.get("cursor")) q.set("cursor", params.get("cursor"));
  const res = await api(`/v1/decisions?${q}`);
  if (!res.ok) return show("Referrals", problemBox(res.body));
  const rows = res.body.decisions.map((d) => [
    d.decided_at.replace("T", " ").slice(0, 19),
    h("a", { href: `#/decision/${d.decision_id}` }, d.application_id),
    pct(d.probability_of_default),
    d.reason_codes.join(", "),
    h("a", { href: `#/referrals/${d.decision_id}` }, "Record the final action"),
  ]);
  show("Referrals awaiting a final action",
    h("p", { class: "note" }, "Referred decisions without a final action, oldest first."),
    rows.length
      ? table(["Referred (UTC)", "Application", { title: "Probability of default", num: true }, "Why referred", "Final action"], rows, { label: "Referrals awaiting a final action" })
      : h("p", {}, "None: every referral has a final action."),
    res.body.next_cursor ? h("a", { href: `#/referrals?cursor=${encodeURIComponent(res.body.next_cursor)}` }, "Next page") : null);
}

async function finalActionForm(id) {
  const rec = await api(`/v1/decisions/${encodeURIComponent(id)}`);
  if (!rec.ok) return show("Final action", problemBox(rec.body));
  const r = rec.body;
  const models = await api("/v1/models");
  const model = models.ok ? models.body.find((m) => m.id === r.model.id && m.version === r.model.version) : null;
  const reasons = model ? model.decline_reasons : null;
  const most = model ? model.max_reasons : 4;
  const idem = uuid();
  const out = h("div", { id: "result" });
  const picks = [];
  for (let i = 0; i < most; i++) {
    picks.push(h("label", {}, `Reason ${i + 1}${i === 0 ? " (for a decline)" : ""}`,
      h("select", { name: `reason${i}` }, h("option", { value: "" }, "—"),
        (reasons || []).map((x) => h("option", { value: x.code }, `${x.code}: ${x.text} (${x.source})`)))));
  }
  const form = h("form", {
    class: "filters",
    onsubmit: guarded(async (ev) => {
      ev.preventDefault();
      const data = new FormData(ev.target);
      const action = data.get("action");
      const chosen = picks.map((_, i) => data.get(`reason${i}`)).filter(Boolean);
      const body = { action, idempotency_key: idem };
      if (action === "decline") body.reasons = chosen;
      if (data.get("note")) body.note = data.get("note");
      const res = await api(`/v1/decisions/${encodeURIComponent(id)}/final-action`, { method: "POST", json: body });
      if (!res.ok) return out.replaceChildren(problemBox(res.body));
      location.hash = `#/decision/${id}`;
    }),
  },
  h("fieldset", {}, h("legend", {}, "Final action"),
    ["approve", "decline", "withdrawn"].map((a) => h("label", { class: "inline" }, h("input", { type: "radio", name: "action", value: a, required: true }), a))),
  picks,
  h("label", {}, "Note for the file (never in a notice)", h("textarea", { name: "note", rows: 3, maxlength: 2000 })),
  h("div", { class: "actions" }, h("button", { type: "submit", class: "primary" }, "Record the final action")));
  show(`Final action for ${r.application_id}`,
    facts([["Outcome", r.outcome], ["Probability of default", pct(r.probability_of_default)], ["Model", `${r.model.id} version ${r.model.version}`],
      ["Why referred", r.response.reasons.map((x) => `${x.code}: ${x.text}`).join("; ")]]),
    reasons ? null : h("div", { class: "problem" }, "The decision's model version is not the one loaded; its reason lists cannot be shown. Load that artifact beside the champion."),
    form, out,
    h("p", { class: "note" }, "A final action is recorded once, beside the decision; the decision itself is never changed."));
}

// ---- fair-lending screening ------------------------------------------------------------

function screening() {
  const input = (name, label, type = "text", extra = {}) => h("label", {}, label, h("input", { name, type, ...extra }));
  const frame = h("div", {});
  const form = h("form", {
    class: "filters",
    onsubmit: guarded(async (ev) => {
      ev.preventDefault();
      const data = new FormData(ev.target);
      const file = data.get("groups");
      const body = { groups_csv: await file.text() };
      for (const k of ["dimension", "from", "to", "model_id", "model_version", "control", "refer"]) {
        if (data.get(k)) body[k] = data.get(k);
      }
      if (data.get("min_group_size")) body.min_group_size = Number(data.get("min_group_size"));
      frame.replaceChildren(h("p", {}, "Building the report…"));
      const res = await api("/v1/fairness/reports?format=html", { method: "POST", json: body });
      if (!res.ok) return frame.replaceChildren(problemBox(res.body));
      const iframe = h("iframe", { class: "report", title: "Fair-lending screening report", sandbox: "allow-same-origin allow-modals" });
      iframe.srcdoc = res.body;
      frame.replaceChildren(
        h("p", { class: "actions" }, h("button", { type: "button", class: "secondary", onclick: () => iframe.contentWindow.print() }, "Print the report")),
        iframe);
    }),
  },
  input("groups", "Group membership (CSV)", "file", { accept: ".csv,text/csv", required: true }),
  input("dimension", "Dimension name", "text", { placeholder: "group" }),
  input("from", "Decided from (date)", "date"),
  input("to", "Decided up to (date, included)", "date"),
  input("model_id", "Model id"),
  input("model_version", "Model version"),
  input("control", "Control group (default: highest rate)"),
  h("label", {}, "Referrals count as", h("select", { name: "refer" },
    h("option", { value: "not_approved" }, "not approved"), h("option", { value: "excluded" }, "left out"), h("option", { value: "final" }, "their final action"))),
  input("min_group_size", "Smallest group compared", "number", { min: 1, placeholder: "30" }),
  h("div", { class: "actions" }, h("button", { type: "submit", class: "primary" }, "Build the report")));
  show("Fair-lending screening", form,
    h("p", { class: "note" }, "The membership file is sent to this service for this one report and is not stored. The report is a screening statistic for the people who decide, not a legal finding."),
    frame);
}

// ---- replay report --------------------------------------------------------------------

function replay() {
  const out = h("div", {});
  const file = h("input", { id: "replay-file", type: "file", accept: ".json,application/json",
    onchange: async () => {
      let report;
      try {
        report = JSON.parse(await file.files[0].text());
      } catch (e) {
        return out.replaceChildren(h("div", { class: "problem", role: "alert" }, `Not a replay report (JSON): ${e.message}`));
      }
      out.replaceChildren(...replayReport(report));
    } });
  show("Replay report", h("label", { for: "replay-file" }, "A report of plumbline replay --json", file),
    h("p", { class: "note" }, "The file is read in this browser and sent nowhere."), out);
}

function replayReport(r) {
  if (typeof r.compared !== "number" || !r.swap_set) return [h("div", { class: "problem", role: "alert" }, "This file is not a replay report: it has no compared count or swap set.")];
  const outcomes = ["approve", "refer", "decline"];
  const extra = Object.keys(r.swap_set).filter((o) => !outcomes.includes(o));
  const all = [...outcomes, ...extra];
  const swap = all.filter((o) => r.swap_set[o]).map((from) => [from, ...all.map((to) => String((r.swap_set[from] || {})[to] || 0))]);
  const movers = r.largest_movers || [];
  return [
    h("h2", {}, "Summary"),
    facts([["Against", r.against], ["Tolerance", String(r.tolerance)], ["Compared", String(r.compared)], ["Unchanged", String(r.unchanged)],
      ["Probability only", String(r.probability_only)], ["Reason changes", `${r.reason_changes} (order only: ${r.reason_order_only})`],
      ["Decision flips", String(r.decision_flips)], ["Errors", String(r.errors)]]),
    h("h2", {}, "Swap set (recorded outcome by new outcome)"),
    table(["Recorded \\ new", ...all.map((o) => ({ title: o, num: true }))], swap, { label: "Swap set" }),
    h("h2", {}, "Largest movers"),
    movers.length ? moverChart(movers) : h("p", {}, "Nothing moved."),
    movers.length ? table(["Case", "Application", "Change", "Outcome", { title: "Probability before", num: true }, { title: "after", num: true }, { title: "change", num: true }],
      movers.map((m) => [m.name, m.application_id, m.change, `${m.outcome[0]} → ${m.outcome[1]}`, fixed(m.probability[0], 6), fixed(m.probability[1], 6), signed(m.probability[1] - m.probability[0])]),
      { label: "Largest movers" }) : null,
  ];
}

const signed = (v) => `${v >= 0 ? "+" : ""}${v.toFixed(6)}`;

function moverChart(movers) {
  const rowH = 22, left = 220, width = 760, top = 10;
  const height = top + rowH * movers.length + 30;
  const most = Math.max(...movers.map((m) => Math.abs(m.probability[1] - m.probability[0])), 1e-9);
  const mid = left + (width - left - 80) / 2;
  const scale = (width - left - 80) / 2 / most;
  const svg = s("svg", { class: "chart", role: "img", width, height, viewBox: `0 0 ${width} ${height}`, "aria-label": "Probability change of the largest movers" },
    s("line", { class: "axis", x1: mid, x2: mid, y1: top, y2: height - 24 }),
    s("text", { x: mid, y: height - 8, "text-anchor": "middle" }, "change in probability of default (new − recorded)"));
  movers.forEach((m, i) => {
    const d = m.probability[1] - m.probability[0];
    const y = top + rowH * i;
    svg.append(s("text", { x: left - 8, y: y + 15, "text-anchor": "end" }, m.application_id || m.name),
      s("rect", { class: d > 0 ? "bar-adverse" : "mover", x: d > 0 ? mid : mid + d * scale, y: y + 3, width: Math.max(Math.abs(d) * scale, 1), height: rowH - 6, "data-delta": d }),
      s("text", { x: d > 0 ? mid + d * scale + 4 : mid + 4, y: y + 15 }, signed(d)));
  });
  return svg;
}

// ---- routing --------------------------------------------------------------------------

async function route() {
  if (location.hash === "#view") return; // the skip link, not a page
  navigation += 1;
  const [path, query] = (location.hash.slice(1) || "/search").split("?");
  const params = new URLSearchParams(query || "");
  const parts = path.split("/").filter(Boolean);
  if (parts[0] === "refused") return refused();
  if (!key()) return signin();
  document.getElementById("nav").hidden = false;
  for (const a of document.querySelectorAll("nav a")) {
    a.toggleAttribute("aria-current", a.getAttribute("href") === `#/${parts[0]}`);
    if (a.hasAttribute("aria-current")) a.setAttribute("aria-current", "page");
  }
  try {
    switch (parts[0]) {
      case "decision": return await decision(parts[1]);
      case "notice": return await notice(parts[1]);
      case "referrals": return parts[1] ? await finalActionForm(parts[1]) : await referrals(params);
      case "screening": return screening();
      case "replay": return replay();
      case "signin": sessionStorage.removeItem(KEY); return signin();
      default: return await search(params);
    }
  } catch (e) {
    if (e instanceof Stale) return;
    show("Something went wrong", h("div", { class: "problem", role: "alert" }, String(e.message || e)));
  }
}

document.addEventListener("DOMContentLoaded", () => {
  document.getElementById("signout").addEventListener("click", () => {
    sessionStorage.removeItem(KEY);
    navigation += 1;
    location.hash = "#/signin";
  });
  // The skip link moves focus to the page without leaving it.
  document.querySelector(".skip").addEventListener("click", (ev) => {
    ev.preventDefault();
    view().focus();
  });
  window.addEventListener("hashchange", route);
  route();
});
