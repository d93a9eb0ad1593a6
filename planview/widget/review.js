// planview review: the operator tree, the detail of one node, and (in the standalone page) the charts.
//
// One plain ES module, no build step. It renders inside Jupyter through anywidget
// (`render({model, el})`) and inside the exported page, where a small local object stands in
// for the widget model. Every string that comes from a plan is put in the page as text
// (textContent, createTextNode, setAttribute on a fixed list of names); nothing here parses
// markup. Shown text passes `visible` first, so a direction override or a control character in
// a name appears as an escape (`\u202e`) and cannot reorder or hide the text around it; the
// report's data and the copied fix keep the real strings.

// Crameri, Scientific colour maps 8, "vik", sampled at 17 evenly spaced points. It is read
// here as log10(actual / estimated) from -4 (10^4 times too many rows estimated: blue) to +4
// (10^4 times too few: red), half an order of magnitude a step.
export const VIK = [
  "#001261", "#022b71", "#034481", "#0c5e92", "#307da6", "#619ebd", "#94bed2", "#c6dbe6",
  "#ece5e0", "#e9ccba", "#dcac90", "#cf8e68", "#c37243", "#b3531f", "#942f06", "#741506",
  "#590008",
];
const SCALE_LIMIT = 4;
const LARGE_PLAN = 80;
const SVG_NS = "http://www.w3.org/2000/svg";
const SAFE_ATTRS = new Set([
  "class", "title", "role", "tabindex", "type", "id", "for", "value", "href", "target", "rel",
  "aria-label", "aria-level", "aria-expanded", "aria-selected", "aria-pressed", "aria-live",
  "aria-hidden", "aria-controls", "disabled", "checked", "spellcheck", "placeholder",
]);

// ---------------------------------------------------------------------------------------------
// small helpers

// What Python's str.isprintable() rejects: control, format (direction marks and overrides,
// zero-width characters), surrogate, private-use and unassigned code points, and every
// separator except the space (line and paragraph separators included).
const HIDDEN = /[\p{C}\p{Z}]/gu;
const BLOCK_KEEP = "\n\t";

function escapeChar(ch) {
  const code = ch.codePointAt(0);
  if (code < 0x100) return `\\x${code.toString(16).padStart(2, "0")}`;
  if (code < 0x10000) return `\\u${code.toString(16).padStart(4, "0")}`;
  return `\\U${code.toString(16).padStart(8, "0")}`;
}

// The same escapes as planview.inert.visible; the characters in `keep` stay.
export function visible(text, keep = "") {
  return String(text).replace(HIDDEN, (ch) => (ch === " " || keep.includes(ch) ? ch : escapeChar(ch)));
}

// Plan text for a <pre>: line breaks and tabs stay, everything else as `visible`.
function textBlock(text) {
  return document.createTextNode(visible(text, BLOCK_KEEP));
}

function el(tag, attrs, ...children) {
  const node = document.createElement(tag);
  setAttrs(node, attrs);
  append(node, children);
  return node;
}

function svg(tag, attrs, ...children) {
  const node = document.createElementNS(SVG_NS, tag);
  for (const [name, value] of Object.entries(attrs || {})) {
    if (value !== null && value !== undefined) node.setAttribute(name, String(value));
  }
  append(node, children);
  return node;
}

function setAttrs(node, attrs) {
  for (const [name, value] of Object.entries(attrs || {})) {
    if (value === null || value === undefined || value === false) continue;
    if (name.startsWith("data-") || SAFE_ATTRS.has(name)) {
      node.setAttribute(name, value === true ? "" : visible(value));
    } else {
      throw new Error(`planview: attribute ${name} is not on the allowed list`);
    }
  }
}

function append(node, children) {
  for (const child of children.flat(Infinity)) {
    if (child === null || child === undefined || child === false) continue;
    node.appendChild(child instanceof Node ? child : document.createTextNode(visible(child)));
  }
}

function hexToRgb(hex) {
  return [1, 3, 5].map((i) => parseInt(hex.slice(i, i + 2), 16));
}

const VIK_RGB = VIK.map(hexToRgb);

export function ratioColour(log10Ratio) {
  const t = Math.max(-SCALE_LIMIT, Math.min(SCALE_LIMIT, log10Ratio));
  const pos = ((t + SCALE_LIMIT) / (2 * SCALE_LIMIT)) * (VIK.length - 1);
  const low = Math.floor(pos);
  const high = Math.min(VIK.length - 1, low + 1);
  const frac = pos - low;
  const rgb = VIK_RGB[low].map((c, i) => Math.round(c + (VIK_RGB[high][i] - c) * frac));
  return `rgb(${rgb[0]}, ${rgb[1]}, ${rgb[2]})`;
}

// WCAG 2.1 relative luminance; the ink is whichever of black and white contrasts more with
// the cell (at least 4.5:1 everywhere on the scale: tests/test_words.py measures it).
function luminance(rgb) {
  const c = rgb.map((v) => { v /= 255; return v <= 0.03928 ? v / 12.92 : Math.pow((v + 0.055) / 1.055, 2.4); });
  return 0.2126 * c[0] + 0.7152 * c[1] + 0.0722 * c[2];
}

export function inkFor(log10Ratio) {
  const rgb = ratioColour(log10Ratio).match(/\d+/g).map(Number);
  const l = luminance(rgb);
  return (1.05 / (l + 0.05)) >= ((l + 0.05) / 0.05) ? "#ffffff" : "#000000";
}

export function formatRows(value) {
  if (value === null || value === undefined) return "–";
  const abs = Math.abs(value);
  if (abs >= 1e9) return `${(value / 1e9).toPrecision(3)}G`;
  if (abs >= 1e7) return `${(value / 1e6).toPrecision(3)}M`;
  if (Number.isInteger(value)) return value.toLocaleString("en-US");
  if (abs >= 100) return Math.round(value).toLocaleString("en-US");
  if (abs < 1) return String(Number(value.toPrecision(3)));
  return value.toLocaleString("en-US", { maximumFractionDigits: 2 });
}

// The same words and formats as planview/words.py (the report's "words"; a test keeps them in step).
const ON_TARGET_LOG10 = Math.log10(1.05);
const SUPERSCRIPT = { "0": "⁰", "1": "¹", "2": "²", "3": "³", "4": "⁴", "5": "⁵", "6": "⁶", "7": "⁷", "8": "⁸", "9": "⁹", "-": "⁻" };

function formatFactor(q) {
  if (q === null || q === undefined || !Number.isFinite(q)) return "–";
  q = Math.max(1, q);
  if (q >= 1e12) return `×10${String(Math.round(Math.log10(q))).replace(/./g, (c) => SUPERSCRIPT[c])}`;
  if (q >= 1e9) return `×${Number((q / 1e9).toPrecision(2))} billion`;
  if (q >= 1e6) return `×${Number((q / 1e6).toPrecision(2))} million`;
  if (q >= 9.95) return `×${Math.round(q).toLocaleString("en-US")}`;
  return `×${q.toFixed(1)}`;
}

function shortError(log10Ratio, q) {
  if (Math.abs(log10Ratio) < ON_TARGET_LOG10) return "on target";
  return `${formatFactor(q ?? Math.pow(10, Math.abs(log10Ratio)))} ${log10Ratio > 0 ? "too low" : "too high"}`;
}

function ownMs(ms) {
  if (ms === null || ms === undefined) return "–";
  if (ms >= 1000) return `${(ms / 1000).toFixed(1)}s`;
  return ms >= 10 ? ms.toFixed(0) : ms.toFixed(ms >= 1 ? 1 : 2);
}

function formatMs(ms) {
  if (ms === null || ms === undefined) return "–";
  if (ms >= 1000) return `${(ms / 1000).toFixed(2)} s`;
  return `${ms.toFixed(ms >= 10 ? 1 : 3)} ms`;
}

function errorWords(log10Ratio, q) {
  if (log10Ratio === null || log10Ratio === undefined) return "–";
  return shortError(log10Ratio, q);
}

const CAUSE_WORDS = {
  correlation: "correlated columns",
  skew: "skewed values",
  range_gap: "values past the histogram's range",
  stale_statistics: "stale statistics",
  default_selectivity: "a default selectivity guess",
  unexplained: "no cause found",
  not_diagnosed: "not diagnosed (past the diagnosis cap)",
  join_selectivity: "a semi- or anti-join selectivity guess",
  filter_combination: "how the engine combines ANDed filters",
  planner_guess: "the planner's built-in guess",
};

function causeWords(cause) {
  if (!cause) return null;
  return CAUSE_WORDS[cause] || String(cause).replace(/_/g, " ");
}

// The report's words for a finding's cause (report.findings[i].text.cause), with this
// module's table only for a report that has none.
function findingCause(finding) {
  return (finding && finding.text && finding.text.cause) || causeWords(finding && finding.cause);
}

// What the find box matches: a node's label, operator, relation, alias, index and condition
// texts, lower-cased once per plan. "#12" matches node 12 only.
export function searchText(node) {
  return [node.label, node.operator, node.relation, node.alias, node.schema, node.index, node.cte_name,
    node.subplan_name, node.function_name, ...(node.conditions || []).map((c) => c && c.text)]
    .filter((t) => t !== null && t !== undefined && t !== "").map((t) => visible(t)).join("\n").toLowerCase();
}

// The ids of the nodes (in the order given) that the query matches; [] for an empty query.
// `texts` (optional) is a Map from id to searchText, so typing does not rebuild the strings.
export function matchNodes(nodes, query, texts) {
  const needle = String(query ?? "").trim().toLowerCase();
  if (!needle) return [];
  const byId = /^#(\d+)$/.exec(needle);
  if (byId) return nodes.filter((n) => n.id === Number(byId[1])).map((n) => n.id);
  const out = [];
  for (const node of nodes) {
    const hay = texts ? texts.get(node.id) : searchText(node);
    if (hay !== undefined && hay.includes(needle)) out.push(node.id);
  }
  return out;
}

export function matchCount(count) {
  if (!count) return "no match";
  return `${count.toLocaleString("en-US")} ${count === 1 ? "match" : "matches"}`;
}

// The evidence a finding carries, less what the detail panel shows already: the numbers
// table's figures (rows, starts, q-error), empty values, nested records, the list of rules
// checked when a line says it, and a single table name for a join (its inputs' relations go
// in its place when the caller knows them). Returns [key, shown value] pairs.
const NUMBERS_TABLE_KEYS = new Set([
  "est_rows", "actual_rows", "starts", "est_rows_per_start", "actual_rows_per_start", "est_total",
  "actual_total", "q_error", "own_q_error", "log10_ratio", "own_log10_ratio", "loops",
]);

function isEmptyValue(value) {
  return value === null || value === undefined || value === ""
    || (Array.isArray(value) && value.every((x) => x === null || x === undefined || x === ""))
    || (typeof value === "object" && !Array.isArray(value) && Object.keys(value).length === 0);
}

export function evidencePairs(evidence, { isJoin = false, inputRelations = [], lines = [] } = {}) {
  const out = [];
  if (!evidence || typeof evidence !== "object") return out;
  const saysChecked = lines.some((line) => /^Checked\b/.test(String(line)));
  for (const [key, value] of Object.entries(evidence)) {
    if (key === "lines" || NUMBERS_TABLE_KEYS.has(key) || isEmptyValue(value)) continue;
    if (key === "checked" && saysChecked) continue;
    if (typeof value === "object" && !(Array.isArray(value) && value.every((x) => x === null || typeof x !== "object"))) continue;
    if ((key === "table" || key === "relation") && isJoin) {
      // a join reads two inputs: name both (unless the evidence lists its tables already)
      if (inputRelations.length >= 2 && isEmptyValue(evidence.tables)) out.push(["relations of its inputs", inputRelations.join(", ")]);
      continue;
    }
    out.push([key.replace(/_/g, " "), Array.isArray(value) ? value.filter((x) => !isEmptyValue(x)).map(evidenceValue).join(", ") : evidenceValue(value)]);
  }
  return out;
}

// Evidence lines, less the one that restates the status line and the numbers table
// ("Estimated 1,000 rows, found 50,104: the estimate is ×50 too low here.").
export function evidenceLines(lines) {
  return (Array.isArray(lines) ? lines : []).map(String).filter((line) => line.trim() && !/^Estimated [^:]*\bfound\b[^:]*: the estimate is\b/.test(line));
}

// A finding's summary without the cause's key in front of it (the cause line says it in words).
export function summaryText(finding) {
  let text = String(finding.summary || "").trim();
  const key = finding.cause ? String(finding.cause).replace(/_/g, " ") : "";
  if (key && text.toLowerCase().startsWith(`${key.toLowerCase()}:`)) text = text.slice(key.length + 1).trim();
  return text ? text.charAt(0).toUpperCase() + text.slice(1) : "";
}

// The pasted text from the report's `source`: as it is, or unpacked from gzip and base64.
export async function sourceText(source) {
  if (typeof source.text === "string") return source.text;
  const bytes = Uint8Array.from(atob(source.gzip_base64), (c) => c.charCodeAt(0));
  const stream = new Blob([bytes]).stream().pipeThrough(new DecompressionStream("gzip"));
  return new Response(stream).text();
}

// The rank-1 origin's node id, or null: what the review selects when it opens.
export function topOrigin(report) {
  const findings = (report && Array.isArray(report.findings) ? report.findings : []).filter((f) => Number.isInteger(f.node));
  if (!findings.length) return null;
  return findings.reduce((best, f) => ((f.rank ?? Infinity) < (best.rank ?? Infinity) ? f : best)).node;
}

const GENERIC_CAUTION =
  "Run fixes on a replica or in a quiet hour first: ANALYZE reads a sample of the table, " +
  "CREATE STATISTICS and index builds take locks, and re-checking with EXPLAIN ANALYZE runs the statement.";

// ---------------------------------------------------------------------------------------------
// the plan, indexed once

// The exported page packs the nodes as columns and rows (its size is then about half); the
// widget gets them as the report has them.
function unpackNodes(report) {
  const packed = report.nodes_packed;
  if (!packed || !Array.isArray(packed.columns) || !Array.isArray(packed.rows)) {
    return Array.isArray(report.nodes) ? report.nodes : [];
  }
  const columns = packed.columns;
  return packed.rows.map((row) => {
    const node = {};
    for (let i = 0; i < columns.length; i++) if (row[i] !== null && row[i] !== undefined) node[columns[i]] = row[i];
    return node;
  });
}

function indexPlan(report) {
  const nodes = unpackNodes(report);
  const byId = new Map();
  for (const node of nodes) byId.set(node.id, node);
  const findings = (Array.isArray(report.findings) ? report.findings : [])
    .filter((f) => byId.has(f.node))
    .slice()
    .sort((a, b) => (a.rank ?? 0) - (b.rank ?? 0));
  const findingOf = new Map(findings.map((f) => [f.node, f]));
  const roots = nodes.filter((n) => n.parent === null || n.parent === undefined || !byId.has(n.parent));
  // pre-order, children as listed; iterative so depth never costs a stack frame
  const order = [];
  const stack = roots.slice().reverse();
  const seen = new Set();
  while (stack.length) {
    const node = stack.pop();
    if (seen.has(node.id)) continue;
    seen.add(node.id);
    order.push(node);
    const kids = (node.children || []).map((c) => byId.get(c)).filter(Boolean);
    for (let i = kids.length - 1; i >= 0; i--) stack.push(kids[i]);
  }
  const subtreeSize = new Map();
  const originsBelow = new Map();
  for (let i = order.length - 1; i >= 0; i--) {
    const node = order[i];
    let size = 0;
    let origins = 0;
    for (const c of node.children || []) {
      size += 1 + (subtreeSize.get(c) || 0);
      origins += (originsBelow.get(c) || 0) + (byId.get(c)?.origin ? 1 : 0);
    }
    subtreeSize.set(node.id, size);
    originsBelow.set(node.id, origins);
  }
  return { report, nodes, byId, findings, findingOf, roots, order, subtreeSize, originsBelow };
}

function ancestors(plan, id) {
  const out = [];
  let node = plan.byId.get(id);
  const guard = new Set();
  while (node && node.parent !== null && node.parent !== undefined && !guard.has(node.parent)) {
    guard.add(node.parent);
    out.push(node.parent);
    node = plan.byId.get(node.parent);
  }
  return out;
}

function openingSet(plan) {
  const open = new Set();
  if (plan.nodes.length <= LARGE_PLAN) {
    for (const node of plan.nodes) open.add(node.id);
    return open;
  }
  for (const f of plan.findings) for (const a of ancestors(plan, f.node)) open.add(a);
  if (!plan.findings.length) for (const node of plan.nodes) if ((node.depth ?? 0) < 2) open.add(node.id);
  return open;
}

function ratioOf(node, colourBy) {
  if (!node.judged) return null;
  const value = colourBy === "own" ? node.own_log10_ratio : node.log10_ratio;
  return value === null || value === undefined ? null : value;
}

function nodeState(node) {
  if (node.origin) return "origin";
  if (node.inherits_from && node.inherits_from.length) return "inherited";
  if (!node.judged) return "neutral";
  return "judged";
}

// ---------------------------------------------------------------------------------------------
// the view

export function render({ model, el: host }) {
  const view = new Review(model, host);
  return () => view.destroy();
}

class Review {
  constructor(model, host) {
    this.model = model;
    this.host = host;
    this.onlyOrigins = false;
    this.colourBy = "whole";
    this.rowsById = new Map();
    this.originItems = new Map();
    this.query = "";
    this.matches = [];
    this.matchSet = new Set();
    this.listeners = [];
    this.root = el("div", {
      class: "pv-review", tabindex: "0", "data-lm-suppress-shortcuts": "true",
      "data-p-suppress-shortcuts": "true", role: "application", "aria-label": "planview plan review",
    });
    host.appendChild(this.root);
    this.listen(model, "change:report", () => this.load());
    this.listen(model, "change:chart_mode", () => this.load());
    this.listen(model, "change:selected", () => this.showSelection());
    this.listen(model, "msg:custom", (msg) => this.onMessage(msg));
    this.keyHandler = (event) => this.onKey(event);
    this.root.addEventListener("keydown", this.keyHandler);
    this.load();
  }

  listen(model, name, handler) {
    model.on(name, handler);
    this.listeners.push([name, handler]);
  }

  destroy() {
    for (const [name, handler] of this.listeners) this.model.off(name, handler);
    this.root.removeEventListener("keydown", this.keyHandler);
    this.root.remove();
  }

  get selected() {
    const value = this.model.get("selected");
    return value === null || value === undefined ? null : value;
  }

  select(id) {
    if (id !== null && !this.plan.byId.has(id)) return;
    if (id === this.selected) {
      this.showSelection();
      return;
    }
    this.model.set("selected", id);
    this.model.save_changes();
  }

  // -- building -------------------------------------------------------------------------------
  load() {
    const report = this.model.get("report") || {};
    this.plan = indexPlan(report);
    this.open = openingSet(this.plan);
    // plain EXPLAIN prints no time: no column of dashes
    this.root.classList.toggle("pv-untimed", !this.plan.nodes.some((n) => n.self_ms !== null && n.self_ms !== undefined));
    this.root.replaceChildren();
    this.root.appendChild(this.buildHeader());
    this.root.appendChild(this.buildToolbar());
    this.root.appendChild(this.buildLegend());
    const lists = this.buildLists();
    if (lists) this.root.appendChild(lists);
    this.treePane = el("div", { class: "pv-tree", role: "tree", "aria-label": "operators" });
    this.detailPane = el("aside", { class: "pv-detail", "aria-live": "polite" });
    this.root.appendChild(el("div", { class: "pv-body" }, this.treePane, this.detailPane));
    this.chartPane = null;
    if (this.model.get("chart_mode") === "svg" && this.plan.nodes.length) {
      this.chartPane = el("div", { class: "pv-charts" });
      this.root.appendChild(this.chartPane);
    }
    this.searchTexts = null;
    this.setQuery(this.query);
    this.drawTree();
    this.root.setAttribute("data-drawn", String(this.plan.nodes.length));
    if (typeof requestAnimationFrame === "function" && typeof performance !== "undefined") {
      requestAnimationFrame(() => this.root.setAttribute("data-painted-ms", performance.now().toFixed(1)));
    }
    this.showSelection();
    if (this.chartPane) {
      const draw = () => this.drawCharts();
      if (typeof requestAnimationFrame === "function") requestAnimationFrame(() => setTimeout(draw, 0));
      else setTimeout(draw, 0);
    }
  }

  buildHeader() {
    const r = this.plan.report;
    const statements = r.statements || [];
    // the paste's times: the report sums its statements once (report.execution_ms)
    const summed = (key) => (r[key] !== undefined ? r[key]
      : statements.some((s) => s[key] !== null && s[key] !== undefined) ? statements.reduce((sum, s) => sum + (s[key] || 0), 0) : null);
    const statement = {
      execution_ms: summed("execution_ms"),
      planning_ms: summed("planning_ms"),
      query_text: statements.map((s) => s.query_text).filter(Boolean).join("\n\n") || null,
    };
    const facts = [
      [statements.length > 1, `${statements.length} statements`],
      [r.engine, r.engine_version ? `${r.engine} ${r.engine_version}` : r.engine],
      [r.format, `${r.format} format`],
      [true, `${this.plan.nodes.length.toLocaleString("en-US")} operators`],
      [true, `${this.plan.findings.length} origin${this.plan.findings.length === 1 ? "" : "s"} at ${formatFactor(r.threshold)} or worse`],
      [statement.execution_ms !== null && statement.execution_ms !== undefined, `ran ${formatMs(statement.execution_ms)}`],
      [statement.planning_ms !== null && statement.planning_ms !== undefined, `planned ${formatMs(statement.planning_ms)}`],
      [r.has_actuals === false, "estimates only (no actual rows)"],
    ].filter(([keep]) => keep).map(([, text]) => el("span", { class: "pv-fact" }, text));
    const header = el("header", { class: "pv-head" }, el("strong", { class: "pv-title" }, "Plan review"), facts);
    const extra = [];
    for (const note of r.notes || []) extra.push(el("div", { class: "pv-note" }, note));
    if (statement.query_text) {
      extra.push(el("details", { class: "pv-query" }, el("summary", {}, "Query text"),
        el("pre", {}, textBlock(statement.query_text))));
    }
    const pasted = this.sourceBlock();
    if (pasted) extra.push(pasted);
    return el("div", {}, header, extra);
  }

  // The plan exactly as pasted (the report's `source`: its text, or gzipped in base64 as the
  // page and the widget carry it), filled when first opened.
  sourceBlock() {
    const source = this.plan.report.source;
    if (!source || typeof source !== "object" || !(source.text || source.gzip_base64)) return null;
    const lines = source.lines ?? String(source.text).split("\n").length;
    const shown = source.shown_chars ?? String(source.text).length;
    const pre = el("pre", { class: "pv-source-text" });
    const box = el("details", { class: "pv-source" },
      el("summary", {}, `Plan as pasted (${Number(lines).toLocaleString("en-US")} line${lines === 1 ? "" : "s"})`));
    if (source.cut) {
      box.appendChild(el("div", { class: "pv-note" },
        `Shown: the first ${Number(shown).toLocaleString("en-US")} of ${Number(source.chars).toLocaleString("en-US")} characters.`));
    }
    box.appendChild(pre);
    let asked = false;
    box.addEventListener("toggle", () => {
      if (!box.open || asked) return;
      asked = true;
      sourceText(source).then(
        (text) => { pre.replaceChildren(textBlock(text)); pre.setAttribute("data-filled", "true"); },
        () => { pre.replaceChildren(document.createTextNode("This browser cannot unpack the text (it needs DecompressionStream).")); });
    });
    return box;
  }

  // The origins (rank, node, cause, impact, the error it adds) and the slowest operators,
  // side by side above the tree; each origin is a button that selects it.
  buildLists() {
    const origins = this.originsList();
    const slowest = this.slowestList();
    if (!origins && !slowest) return null;
    return el("div", { class: "pv-lists" }, origins, slowest);
  }

  originsList() {
    this.originItems = new Map();
    const findings = this.plan.findings;
    if (!findings.length) return null;
    const head = el("div", { class: "pv-origin-item pv-origin-head", "aria-hidden": "true" },
      el("span", { class: "pv-o-rank" }, "rank"), el("span", { class: "pv-o-node" }, "operator"),
      el("span", { class: "pv-o-cause" }, "cause"), el("span", { class: "pv-o-impact" }, "time under it"),
      el("span", { class: "pv-o-added" }, "error it adds"));
    const items = findings.map((f) => {
      const node = this.plan.byId.get(f.node);
      const impact = f.impact && typeof f.impact === "object" ? f.impact : {};
      const ms = impact.origin_ms ?? impact.ms;
      const share = impact.origin_ms !== null && impact.origin_ms !== undefined ? impact.origin_share : impact.share;
      const timeText = ms === null || ms === undefined ? "–"
        : `${formatMs(ms)}${share !== null && share !== undefined ? ` · ${Math.round(share * 100)}%` : ""}`;
      const added = (node && node.text && node.text.added) || (f.text && f.text.added) || "–";
      const button = el("button", {
        type: "button", class: "pv-origin-item", "data-node": String(f.node), "aria-pressed": "false",
        title: `${(f.text && f.text.rank) || `origin ${f.rank}`}: select #${f.node}`,
      },
      el("span", { class: "pv-o-rank" }, String(f.rank ?? "")),
      el("span", { class: "pv-o-node" }, el("span", { class: "pv-o-id" }, `#${f.node}`), " ", node ? node.label || node.operator || "" : ""),
      el("span", { class: "pv-o-cause" }, findingCause(f) || "not diagnosed yet"),
      el("span", { class: "pv-o-impact" }, timeText),
      el("span", { class: "pv-o-added" }, added));
      button.addEventListener("click", () => this.select(f.node));
      this.originItems.set(f.node, button);
      return button;
    });
    return el("section", { class: "pv-origins", "aria-label": "origins, most impact first" },
      el("h4", {}, `Where the error starts: ${findings.length} origin${findings.length === 1 ? "" : "s"}, most impact first`),
      el("div", { class: "pv-origin-list" }, head, items));
  }

  slowestList() {
    const items = this.plan.report.slowest || [];
    if (!items.length) return null;
    const box = el("section", { class: "pv-slowest", "aria-label": "slowest operators" },
      el("h4", {}, "Slowest operators, by own time"),
      el("ol", {}, items.map((item) => el("li", { "data-node": String(item.node) },
        this.nodeLink(item.node, "pv-slowest-link"), " ",
        `${formatMs(item.self_ms)} own`,
        item.share !== null && item.share !== undefined ? ` (${(item.share * 100).toFixed(1)}%)` : "",
        `, ${formatMs(item.total_ms)} with its inputs`,
        item.origin ? el("span", { class: "pv-slowest-origin" }, " · origin") : ""))));
    return box;
  }

  buildToolbar() {
    const bar = el("div", { class: "pv-toolbar", role: "toolbar", "aria-label": "review controls" });
    this.onlyBox = el("input", { type: "checkbox", class: "pv-only", id: `pv-only-${Math.random().toString(36).slice(2)}` });
    this.onlyBox.addEventListener("change", () => {
      this.onlyOrigins = this.onlyBox.checked;
      this.drawTree();
      this.showSelection();
    });
    const onlyLabel = el("label", { class: "pv-switch", for: this.onlyBox.id, title: "Show only the operators where an error starts, with the path down to them" },
      this.onlyBox, " Origins only");
    const prev = el("button", { type: "button", class: "pv-prev", title: "Previous origin, by impact (key: p)" }, "◀ Previous");
    const next = el("button", { type: "button", class: "pv-next", title: "Next origin, by impact (key: n)" }, "Next ▶");
    prev.addEventListener("click", () => this.step(-1));
    next.addEventListener("click", () => this.step(1));
    this.position = el("span", { class: "pv-position" });
    const openAll = el("button", { type: "button", class: "pv-open-all", title: "Unfold every subtree" }, "Unfold all");
    openAll.addEventListener("click", () => {
      for (const node of this.plan.nodes) this.open.add(node.id);
      this.drawTree();
      this.showSelection();
    });
    const fold = el("button", { type: "button", class: "pv-fold", title: "Fold everything except the paths to the origins" }, "Fold to origins");
    fold.addEventListener("click", () => {
      this.open = new Set();
      for (const f of this.plan.findings) for (const a of ancestors(this.plan, f.node)) this.open.add(a);
      if (!this.plan.findings.length) for (const r of this.plan.roots) this.open.add(r.id);
      this.drawTree();
      this.showSelection();
    });
    const colour = el("select", { class: "pv-colour-by", title: "What the colour shows", "aria-label": "colour by" },
      el("option", { value: "whole" }, "Colour: error at the node"),
      el("option", { value: "own" }, "Colour: error it adds"));
    colour.addEventListener("change", () => {
      this.colourBy = colour.value;
      this.drawTree();
      this.showSelection();
    });
    const find = el("input", {
      type: "search", class: "pv-find", placeholder: "find operator, table, filter, #id…", "aria-label": "find",
      spellcheck: "false", title: "Matches as you type; Enter: next match, Shift+Enter: previous",
    });
    find.value = this.query;
    this.findCount = el("span", { class: "pv-find-count", "aria-live": "polite" });
    find.addEventListener("input", () => {
      this.setQuery(find.value);
      this.markMatches();
    });
    find.addEventListener("keydown", (event) => {
      if (event.key === "Enter") {
        event.preventDefault();
        this.findNext(event.shiftKey ? -1 : 1);
      } else if (event.key === "Escape" && find.value) {
        event.preventDefault();
        find.value = "";
        this.setQuery("");
        this.markMatches();
      }
      event.stopPropagation();
    });
    append(bar, [onlyLabel, prev, this.position, next, openAll, fold, colour,
      el("span", { class: "pv-find-box" }, find, this.findCount)]);
    if (this.model.get("can_save")) {
      const save = el("button", { type: "button", class: "pv-save", title: "Write the review page and the ticket text next to the notebook" }, "Save for ticket");
      save.addEventListener("click", () => {
        this.saveStatus.textContent = "saving…";
        this.model.send({ kind: "save" });
      });
      this.saveStatus = el("span", { class: "pv-save-status", "aria-live": "polite" });
      append(bar, [save, this.saveStatus]);
    }
    return bar;
  }

  buildLegend() {
    const strip = el("span", { class: "pv-strip", "aria-hidden": "true" });
    for (const colour of VIK) {
      const cell = el("span", { class: "pv-strip-cell" });
      cell.style.background = colour;
      strip.appendChild(cell);
    }
    const ticks = el("span", { class: "pv-ticks", "aria-hidden": "true" },
      ["×10⁴", "×1000", "×100", "×10", "1", "×10", "×100", "×1000", "×10⁴"].map((t) => el("span", {}, t)));
    const said = this.plan.report.words || {};
    return el("div", { class: "pv-legend", role: "note" },
      el("span", { class: "pv-legend-end" }, said.scale_low || "estimate too high"),
      el("span", { class: "pv-scale" }, strip, ticks),
      el("span", { class: "pv-legend-end" }, said.scale_high || "estimate too low"),
      el("span", { class: "pv-key" }, el("span", { class: "pv-badge pv-badge-origin" }, "◆ origin"), " error starts here"),
      el("span", { class: "pv-key" }, el("span", { class: "pv-badge pv-badge-inherited" }, "↳ carried"), " error from below"),
      el("span", { class: "pv-key" }, el("span", { class: "pv-chip pv-chip-neutral" }), " not judged"),
    );
  }

  // -- the tree -------------------------------------------------------------------------------
  visibleRows() {
    const rows = [];
    if (this.onlyOrigins) {
      const keep = new Set();
      for (const f of this.plan.findings) {
        keep.add(f.node);
        for (const a of ancestors(this.plan, f.node)) keep.add(a);
      }
      for (const node of this.plan.order) if (keep.has(node.id)) rows.push(node);
      return rows;
    }
    const stack = this.plan.roots.slice().reverse();
    const seen = new Set();
    while (stack.length) {
      const node = stack.pop();
      if (seen.has(node.id)) continue;
      seen.add(node.id);
      rows.push(node);
      if (!this.open.has(node.id)) continue;
      const kids = (node.children || []).map((c) => this.plan.byId.get(c)).filter(Boolean);
      for (let i = kids.length - 1; i >= 0; i--) stack.push(kids[i]);
    }
    return rows;
  }

  drawTree() {
    const rows = this.visibleRows();
    this.visible = rows;
    this.rowsById = new Map();
    const fragment = document.createDocumentFragment();
    fragment.appendChild(el("div", { class: "pv-row pv-row-head", "aria-hidden": "true" },
      el("span", { class: "pv-cell-op" }, "operator"),
      el("span", { class: "pv-num" }, "estimated"),
      el("span", { class: "pv-num" }, "actual"),
      el("span", { class: "pv-num" }, "starts"),
      el("span", { class: "pv-num pv-own-ms", title: "own time, in all starts (its inputs' taken out)" }, "own ms"),
      el("span", { class: "pv-err" }, "error")));
    const statements = this.plan.report.statements || [];
    const statementAt = new Map(statements.length > 1 ? statements.map((st, i) => [st.root, i]) : []);
    for (const node of rows) {
      if (statementAt.has(node.id)) fragment.appendChild(this.statementRow(statements, statementAt.get(node.id)));
      const row = this.buildRow(node);
      this.rowsById.set(node.id, row);
      fragment.appendChild(row);
    }
    if (!rows.length) fragment.appendChild(el("div", { class: "pv-empty" }, this.onlyOrigins ? "No origin: no estimate is off by the threshold or more." : "No operators."));
    this.treePane.replaceChildren(fragment);
    this.position.textContent = this.positionText();
  }

  // A header row over each statement's operators, with the statement's own times.
  statementRow(statements, index) {
    const st = statements[index];
    const facts = [];
    if (st.execution_ms !== null && st.execution_ms !== undefined) facts.push(`ran ${formatMs(st.execution_ms)}`);
    else if (st.total_ms !== null && st.total_ms !== undefined) facts.push(`operators ${formatMs(st.total_ms)}`);
    if (st.planning_ms !== null && st.planning_ms !== undefined) facts.push(`planned ${formatMs(st.planning_ms)}`);
    const query = st.query_text ? String(st.query_text).replace(/\s+/g, " ").trim() : "";
    return el("div", { class: "pv-statement-row", "data-statement": String(index), role: "presentation" },
      el("strong", {}, `Statement ${index + 1} of ${statements.length}`),
      facts.length ? el("span", { class: "pv-statement-time" }, ` · ${facts.join(" · ")}`) : "",
      query ? el("span", { class: "pv-statement-query", title: query }, ` · ${query}`) : "");
  }

  buildRow(node) {
    const state = nodeState(node);
    const ratio = ratioOf(node, this.colourBy);
    const hasKids = (node.children || []).length > 0;
    const isOpen = this.open.has(node.id);
    const context = this.onlyOrigins && !node.origin;
    const row = el("div", {
      class: `pv-row pv-${state}${context ? " pv-context" : ""}${this.matchSet.has(node.id) ? " pv-match" : ""}`, role: "treeitem",
      "aria-level": String((node.depth ?? 0) + 1), "aria-selected": "false",
      "aria-expanded": hasKids && !this.onlyOrigins ? String(isOpen) : null, "data-id": String(node.id),
    });
    const indent = el("span", { class: "pv-indent" });
    indent.style.width = `${Math.min(node.depth ?? 0, 60) * 14}px`;
    let toggle;
    if (hasKids && !this.onlyOrigins) {
      toggle = el("button", {
        type: "button", class: "pv-toggle", "aria-label": isOpen ? "fold" : "unfold",
        title: `${isOpen ? "Fold" : "Unfold"} ${this.plan.subtreeSize.get(node.id)} operator(s) below`,
      }, isOpen ? "▾" : "▸");
      toggle.addEventListener("click", (event) => {
        event.stopPropagation();
        this.toggle(node.id);
      });
    } else {
      toggle = el("span", { class: "pv-toggle-space" });
    }
    const chip = el("span", { class: `pv-chip${ratio === null ? " pv-chip-neutral" : ""}` });
    if (ratio !== null) chip.style.background = ratioColour(ratio);
    const op = el("span", { class: "pv-cell-op" }, indent, toggle, chip);
    if (node.subplan_name && ["InitPlan", "SubPlan"].includes(node.parent_relationship)) {
      op.appendChild(el("span", { class: "pv-sub" }, node.subplan_name));
    } else if (node.cte_name && !node.relation && node.parent_relationship === "InitPlan") {
      op.appendChild(el("span", { class: "pv-sub" }, `CTE ${node.cte_name}`));
    }
    op.appendChild(el("span", { class: "pv-id" }, (node.text && node.text.id) || `#${node.id}`));
    op.appendChild(el("span", { class: "pv-label", title: node.label || node.operator || "" }, node.label || node.operator || "?"));
    if (hasKids && !isOpen && !this.onlyOrigins) {
      const hidden = this.plan.subtreeSize.get(node.id);
      const inner = this.plan.originsBelow.get(node.id);
      op.appendChild(el("span", { class: `pv-folded${inner ? " pv-folded-origins" : ""}` },
        `+${hidden}${inner ? `, ${inner} origin${inner === 1 ? "" : "s"}` : ""}`));
    }
    const err = el("span", { class: "pv-err" });
    if (ratio === null) {
      err.textContent = node.judged ? "–" : "not judged";
      if (!node.judged && node.not_judged_reason) err.setAttribute("title", visible(`not judged: ${node.not_judged_reason}`));
    } else {
      const q = this.colourBy === "own" ? Math.pow(10, Math.abs(ratio)) : node.q_error;
      const said = this.colourBy === "own" ? null : node.text && node.text.error;
      err.textContent = said || shortError(ratio, q);
      err.setAttribute("title", said || errorWords(ratio, q));
      err.style.background = ratioColour(ratio);
      err.style.color = inkFor(ratio);
    }
    const finding = this.plan.findingOf.get(node.id);
    if (state === "origin") {
      op.insertBefore(el("span", {
        class: "pv-badge pv-badge-origin",
        title: `origin ${finding ? finding.rank : ""}${finding && finding.cause ? ": " + causeWords(finding.cause) : ""}`,
      }, `◆${finding ? finding.rank : ""}`), op.querySelector(".pv-id"));
    } else if (state === "inherited") {
      op.appendChild(el("span", { class: "pv-badge pv-badge-inherited", title: "carries the error of these origins" },
        `↳ #${node.inherits_from.slice(0, 3).join(", #")}`));
    }
    append(row, [op,
      el("span", { class: "pv-num" }, formatRows(node.est_total ?? node.est_rows)),
      el("span", { class: "pv-num" }, formatRows(node.actual_total)),
      el("span", { class: "pv-num" }, formatRows(node.starts)),
      el("span", { class: "pv-num pv-own-ms", title: node.time_note || "" }, ownMs(node.self_ms)),
      err]);
    row.addEventListener("click", () => this.select(node.id));
    return row;
  }

  toggle(id) {
    if (this.open.has(id)) this.open.delete(id);
    else this.open.add(id);
    this.drawTree();
    this.markSelected(false);
  }

  reveal(id) {
    let changed = false;
    if (this.onlyOrigins && !this.rowsById.has(id)) {
      this.onlyOrigins = false;
      this.onlyBox.checked = false;
      changed = true;
    }
    for (const a of ancestors(this.plan, id)) {
      if (!this.open.has(a)) {
        this.open.add(a);
        changed = true;
      }
    }
    if (changed) this.drawTree();
  }

  markSelected(scroll) {
    for (const row of this.treePane.querySelectorAll(".pv-row.pv-selected")) {
      row.classList.remove("pv-selected");
      row.setAttribute("aria-selected", "false");
    }
    for (const [id, item] of this.originItems) {
      const on = id === this.selected;
      item.classList.toggle("pv-origin-item-selected", on);
      item.setAttribute("aria-pressed", String(on));
      if (on && scroll) keepInView(item);
    }
    const row = this.rowsById.get(this.selected);
    if (row) {
      row.classList.add("pv-selected");
      row.setAttribute("aria-selected", "true");
      if (scroll && typeof row.scrollIntoView === "function") row.scrollIntoView({ block: "nearest" });
    }
  }

  showSelection() {
    const id = this.selected;
    if (id !== null && this.plan.byId.has(id)) this.reveal(id);
    this.markSelected(true);
    this.drawDetail();
    this.position.textContent = this.positionText();
    if (this.charts) this.charts.highlight(id);
  }

  positionText() {
    const total = this.plan.findings.length;
    if (!total) return "no origins";
    const index = this.plan.findings.findIndex((f) => f.node === this.selected);
    return index >= 0 ? `origin ${index + 1} of ${total}` : `${total} origin${total === 1 ? "" : "s"}`;
  }

  step(direction) {
    const list = this.plan.findings;
    if (!list.length) return;
    const index = list.findIndex((f) => f.node === this.selected);
    let next;
    if (index < 0) next = direction > 0 ? 0 : list.length - 1;
    else next = (index + direction + list.length) % list.length;
    this.select(list[next].node);
  }

  // The find box: every node that matches, in tree order; rows shown get `pv-match`.
  setQuery(text) {
    this.query = String(text ?? "");
    if (this.query.trim() && !this.searchTexts) {
      this.searchTexts = new Map(this.plan.order.map((n) => [n.id, searchText(n)]));
      this.orderIndex = new Map(this.plan.order.map((n, i) => [n.id, i]));
    }
    this.matches = matchNodes(this.plan.order, this.query, this.searchTexts);
    this.matchSet = new Set(this.matches);
    if (this.findCount) {
      this.findCount.textContent = this.query.trim() ? matchCount(this.matches.length) : "";
      this.findCount.classList.toggle("pv-find-none", Boolean(this.query.trim()) && !this.matches.length);
    }
  }

  // The rows on screen take or lose the match mark (no redraw: typing stays quick on a big tree).
  markMatches() {
    for (const [id, row] of this.rowsById) row.classList.toggle("pv-match", this.matchSet.has(id));
  }

  // Enter / Shift+Enter: the next / previous match after the selected node, in tree order.
  findNext(direction) {
    const list = this.matches;
    if (!list.length) return;
    const here = this.orderIndex.get(this.selected);
    let next;
    if (here === undefined) next = direction > 0 ? list[0] : list[list.length - 1];
    else if (direction > 0) next = list.find((id) => this.orderIndex.get(id) > here) ?? list[0];
    else next = [...list].reverse().find((id) => this.orderIndex.get(id) < here) ?? list[list.length - 1];
    this.select(next);
    if (this.findCount) {
      this.findCount.textContent = `${list.indexOf(next) + 1} of ${matchCount(list.length)}`;
    }
  }

  onKey(event) {
    const target = event.target;
    if (target && (target.tagName === "INPUT" || target.tagName === "SELECT" || target.tagName === "TEXTAREA")) return;
    const key = event.key;
    let handled = true;
    if (key === "n" || key === "]") this.step(1);
    else if (key === "p" || key === "[") this.step(-1);
    else if (key === "ArrowDown" || key === "ArrowUp") this.moveRow(key === "ArrowDown" ? 1 : -1);
    else if (key === "ArrowRight" || key === "ArrowLeft") this.foldKey(key === "ArrowRight");
    else if (key === "o") this.onlyBox.click();
    else if (key === "Escape") this.select(null);
    else handled = false;
    if (handled) {
      event.preventDefault();
      event.stopPropagation();
    }
  }

  moveRow(direction) {
    const rows = this.visible || [];
    if (!rows.length) return;
    const index = rows.findIndex((n) => n.id === this.selected);
    const next = index < 0 ? 0 : Math.max(0, Math.min(rows.length - 1, index + direction));
    this.select(rows[next].id);
  }

  foldKey(unfold) {
    const node = this.plan.byId.get(this.selected);
    if (!node) return;
    const hasKids = (node.children || []).length > 0;
    if (unfold && hasKids && !this.open.has(node.id)) this.toggle(node.id);
    else if (!unfold && hasKids && this.open.has(node.id)) this.toggle(node.id);
    else if (!unfold && node.parent !== null && node.parent !== undefined) this.select(node.parent);
  }

  // -- the detail panel -----------------------------------------------------------------------
  drawDetail() {
    const pane = this.detailPane;
    const node = this.plan.byId.get(this.selected);
    if (!node) {
      const first = this.plan.findings[0];
      pane.replaceChildren(el("div", { class: "pv-hint" },
        el("p", {}, first ? "Pick an operator, or start with the origin that costs the most:" : "Pick an operator to see its numbers."),
        first ? this.nodeLink(first.node, "pv-first") : null,
        el("p", { class: "pv-keys" }, "Keys: n / p next and previous origin, ↑ ↓ move, ← → fold and unfold, o origins only.")));
      return;
    }
    const finding = this.plan.findingOf.get(node.id);
    // status, then cause, fix and caution (seen without scrolling), then the figures
    const parts = [el("h3", { class: "pv-detail-title" }, `#${node.id} `, node.label || node.operator || "")];
    parts.push(this.statusLine(node, finding));
    if (finding) parts.push(...this.findingParts(finding));
    parts.push(el("h4", {}, "Numbers"));
    parts.push(this.numbersTable(node));
    const conditions = (node.conditions || []).filter((c) => c && c.text !== null && c.text !== undefined && String(c.text).trim());
    if (conditions.length) {
      parts.push(el("h4", {}, "Conditions"));
      parts.push(el("dl", { class: "pv-conditions" }, conditions.map((c) => [
        el("dt", {}, c.key || c.kind || "condition"), el("dd", {}, el("code", {}, c.text))])));
    }
    if (finding) parts.push(...this.evidenceParts(finding, node));
    const derivation = node.derivation && typeof node.derivation === "object" ? node.derivation : null;
    if (derivation && Array.isArray(derivation.steps) && derivation.steps.length) {
      parts.push(el("h4", {}, "The estimate worked out from the statistics"));
      parts.push(el("ol", { class: "pv-derivation" }, derivation.steps.map((step) => el("li", {}, String(step)))));
    }
    if ((node.derived || []).length) {
      parts.push(el("h4", {}, "How the numbers were read"));
      parts.push(el("ul", { class: "pv-derived" }, node.derived.map((d) => el("li", {}, d))));
    }
    pane.replaceChildren(...parts.filter(Boolean));
  }

  nodeLink(id, extraClass) {
    const target = this.plan.byId.get(id);
    const link = el("button", { type: "button", class: `pv-link${extraClass ? " " + extraClass : ""}`, "data-target": String(id) },
      `#${id} ${target ? target.label || target.operator || "" : ""}`);
    link.addEventListener("click", () => this.select(id));
    return link;
  }

  statusLine(node, finding) {
    const status = el("div", { class: `pv-status pv-status-${nodeState(node)}` });
    const text = node.text || {};
    const inAll = text.error || errorWords(node.log10_ratio, node.q_error);
    if (node.origin) {
      const own = node.own_log10_ratio;
      const added = text.added || (own === null || own === undefined ? null : `adds ${shortError(own)}`);
      append(status, [el("strong", {}, `Origin${finding ? ` ${finding.rank} of ${this.plan.findings.length}` : ""}: `),
        "the error starts here. ",
        added ? el("span", { class: "pv-added" }, `Here: ${added}`) : "",
        // the error with its inputs, when its inputs bring some of it (else it is the same figure)
        added && added.endsWith(inAll) ? "" : [added ? " · " : "", el("span", { class: "pv-in-all" }, `with its inputs: ${inAll}`)]]);
    } else if (node.inherits_from && node.inherits_from.length) {
      append(status, [el("strong", {}, "Carried error: "),
        `${inAll} here, but the error comes from below. Go to `,
        node.inherits_from.map((id, i) => [i ? ", " : "", this.nodeLink(id, "pv-origin-link")])]);
    } else if (!node.judged) {
      append(status, [el("strong", {}, "Not judged: "), node.not_judged_reason || "no comparable numbers"]);
    } else {
      append(status, [el("strong", {}, "Within the threshold: "), inAll]);
    }
    return status;
  }

  numbersTable(node) {
    const rows = [
      ["estimated rows, per start", formatRows(node.est_rows)],
      ["actual rows, per start", node.executed === false ? "never executed" : formatRows(node.actual_rows)],
      ["starts", formatRows(node.starts)],
      ["estimated in all", formatRows(node.est_total)],
      ["actual in all", formatRows(node.actual_total)],
      ["q-error", node.q_error === null || node.q_error === undefined ? "–" : formatFactor(node.q_error)],
      ["log₁₀(actual / estimated)", node.log10_ratio === null || node.log10_ratio === undefined ? "–" : node.log10_ratio.toFixed(2)],
      ["added here (log₁₀)", node.own_log10_ratio === null || node.own_log10_ratio === undefined ? "–" : node.own_log10_ratio.toFixed(2)],
    ];
    if (node.total_cost !== null && node.total_cost !== undefined) rows.push(["cost", `${formatRows(node.startup_cost)} … ${formatRows(node.total_cost)}`]);
    if (node.actual_total_ms !== null && node.actual_total_ms !== undefined) rows.push(["time per start", `${formatMs(node.actual_startup_ms)} … ${formatMs(node.actual_total_ms)}`]);
    if (node.total_ms !== null && node.total_ms !== undefined) {
      rows.push(["time with inputs, in all / per start", `${formatMs(node.total_ms)} / ${formatMs(node.total_ms_per_start)}`]);
      rows.push(["own time, in all / per start", `${formatMs(node.self_ms)} / ${formatMs(node.self_ms_per_start)}`]);
      if (node.time_note) rows.push(["own time note", node.time_note]);
    }
    for (const [key, value] of Object.entries(node.rows_removed || {})) rows.push([`removed by ${key.toLowerCase()}, per start`, formatRows(value)]);
    for (const [key, value] of Object.entries(node.buffers || {})) rows.push([`buffers: ${key}`, formatRows(value)]);
    if (node.workers_planned !== null && node.workers_planned !== undefined) rows.push(["workers planned / launched", `${node.workers_planned} / ${node.workers_launched ?? "–"}`]);
    return el("table", { class: "pv-numbers" }, el("tbody", {}, rows.filter(([, v]) => v !== "–" && v !== "– / –").map(([k, v]) => el("tr", {}, el("th", {}, k), el("td", {}, v)))));
  }

  findingParts(finding) {
    const parts = [el("h4", {}, "What the statistics probably missed")];
    const cause = findingCause(finding);
    const causeLine = el("div", { class: "pv-cause" });
    causeLine.setAttribute("data-cause", finding.cause || "");
    append(causeLine, [el("strong", {}, cause ? cause.charAt(0).toUpperCase() + cause.slice(1) : "Not diagnosed yet"),
      finding.confidence !== null && finding.confidence !== undefined ? el("span", { class: "pv-confidence" }, ` confidence ${Math.round(finding.confidence * 100)}%`) : "",
      (finding.also || []).length ? el("span", { class: "pv-also" }, `; also possible: ${((finding.text && finding.text.also) || finding.also.map(causeWords)).join(", ")}`) : ""]);
    parts.push(causeLine);
    const summary = summaryText(finding);
    if (summary) parts.push(el("p", { class: "pv-summary" }, summary));
    const impact = finding.impact && typeof finding.impact === "object" ? finding.impact : {};
    if (impact.origin_ms !== null && impact.origin_ms !== undefined) {
      parts.push(el("p", { class: "pv-impact-time" }, el("strong", {}, "Time under it: "),
        `${formatMs(impact.origin_ms)} with its inputs`,
        impact.origin_share !== null && impact.origin_share !== undefined
          ? `, ${Math.round(impact.origin_share * 100)}% of the query` : ""));
    }
    // where the error ends up, when that is above the origin (at the origin it is the line above)
    if (impact.text && (impact.node !== finding.node || impact.origin_ms === null || impact.origin_ms === undefined)) {
      parts.push(el("p", { class: "pv-impact" }, el("strong", {}, "Where the error ends up: "), impact.text));
    }
    // a live session's measurement and proof (planview/live), in the report's words
    const said = finding.text || {};
    if (said.measured) parts.push(el("p", { class: "pv-measured" }, el("strong", {}, "Measured on the database: "), said.measured));
    if (finding.fix) {
      parts.push(el("h4", {}, "Suggested fix"));
      const code = el("pre", { class: "pv-fix" }, el("code", {}, textBlock(finding.fix)));
      const copy = el("button", { type: "button", class: "pv-copy", title: "Copy the SQL" }, "Copy SQL");
      const copied = el("span", { class: "pv-copied", "aria-live": "polite" });
      copy.addEventListener("click", () => copyText(finding.fix).then(
        () => { copied.textContent = "copied"; },
        () => { copied.textContent = "select the text and copy it by hand"; }));
      const actions = [copy, copied];
      if (this.model.get("can_prove") && !finding.proof) {
        // a live session reviewed the plan: the kernel tries the fix in a transaction it rolls back
        const prove = el("button", { type: "button", class: "pv-prove",
          title: "Run this fix on a copy of the table inside a transaction, plan the statement again with plain EXPLAIN, and roll back. It reads the table; nothing is kept." },
        "Try it (rolled back)");
        this.proveStatus = el("span", { class: "pv-prove-status", "aria-live": "polite" });
        prove.addEventListener("click", () => {
          prove.disabled = true;
          this.proveStatus.textContent = "trying the fix in a transaction that will be rolled back…";
          this.model.send({ kind: "prove", node: finding.node });
        });
        actions.push(prove, this.proveStatus);
      }
      parts.push(el("div", { class: "pv-fix-box" }, code, el("div", { class: "pv-fix-actions" }, ...actions)));
      if (said.proof) parts.push(el("p", { class: "pv-proof" }, el("strong", {}, "Tried and rolled back: "), said.proof));
      parts.push(el("div", { class: "pv-caution", role: "note" }, el("strong", {}, "Before you run it: "),
        finding.caution || GENERIC_CAUTION));
    } else if (finding.caution) {
      parts.push(el("div", { class: "pv-caution", role: "note" }, el("strong", {}, "Caution: "), finding.caution));
    }
    return parts;
  }

  // The evidence, after the numbers: what the numbers table and the status line do not say.
  evidenceParts(finding, node) {
    const evidence = finding.evidence && typeof finding.evidence === "object" ? finding.evidence : {};
    const derived = (node.derived || []).map((d) => String(d).toLowerCase());
    const lines = evidenceLines(evidence.lines).filter((line) => !derived.some((d) => d && line.toLowerCase().includes(d)));
    const isJoin = node.own_rule === "join" || Boolean(node.join_type);
    const pairs = evidencePairs(evidence, { isJoin, inputRelations: isJoin ? this.inputRelations(node) : [], lines: evidence.lines || [] });
    const parts = [];
    const summary = summaryText(finding).toLowerCase();
    const reason = finding.confidence_reason && !summary.includes(String(finding.confidence_reason).trim().toLowerCase())
      ? finding.confidence_reason : null;
    if (lines.length || pairs.length || reason) parts.push(el("h4", {}, "Evidence"));
    if (reason) parts.push(el("p", { class: "pv-confidence-reason" }, reason));
    if (lines.length) parts.push(el("ul", { class: "pv-evidence-lines" }, lines.map((line) => el("li", {}, line))));
    if (pairs.length) {
      parts.push(el("table", { class: "pv-evidence" }, el("tbody", {}, pairs.map(([k, v]) => el("tr", {},
        el("th", {}, k), el("td", {}, v))))));
    }
    return parts;
  }

  // For a join: the first relation read under each of its inputs (a walk of its subtree,
  // done for the one selected node).
  inputRelations(node) {
    const out = [];
    for (const childId of node.children || []) {
      const queue = [childId];
      const seen = new Set();
      for (let head = 0; head < queue.length; head++) {
        const n = this.plan.byId.get(queue[head]);
        if (!n || seen.has(n.id)) continue;
        seen.add(n.id);
        if (n.relation) {
          out.push(n.alias && n.alias !== n.relation ? `${n.relation} ${n.alias}` : n.relation);
          break;
        }
        for (const c of n.children || []) queue.push(c);
      }
    }
    return out;
  }

  onMessage(msg) {
    if (!msg || typeof msg !== "object") return;
    if (msg.kind === "prove-failed" && this.proveStatus) {
      this.proveStatus.textContent = visible(`not proven: ${msg.message || "unknown error"}`);
      return;
    }
    if (!this.saveStatus) return;
    if (msg.kind === "saved") this.saveStatus.textContent = visible(`saved ${(msg.paths || []).join(" and ")}`);
    else if (msg.kind === "save-failed") this.saveStatus.textContent = visible(`could not save: ${msg.message || "unknown error"}`);
  }

  // -- charts (the standalone page, or a notebook without plotly) -----------------------------
  drawCharts() {
    if (!this.chartPane) return;
    this.charts = new SvgCharts(this.plan, (id) => this.select(id));
    this.chartPane.replaceChildren(...this.charts.elements);
    this.charts.highlight(this.selected);
  }
}

// Scroll an origins-list row into its list's view, moving nothing else on the page.
function keepInView(item) {
  const list = item.parentElement;
  if (!list || !list.clientHeight) return;
  const top = item.offsetTop;  // the list is the rows' offset parent (position: relative)
  const head = list.firstElementChild && list.firstElementChild !== item ? list.firstElementChild.offsetHeight : 0;
  if (top - head < list.scrollTop) list.scrollTop = Math.max(0, top - head);
  else if (top + item.offsetHeight > list.scrollTop + list.clientHeight) list.scrollTop = top + item.offsetHeight - list.clientHeight;
}

function evidenceValue(value) {
  if (typeof value === "boolean") return value ? "yes" : "no";
  if (typeof value === "number") return Math.abs(value) < 1 ? String(Number(value.toPrecision(4))) : formatRows(value);
  return String(value);
}

function copyText(text) {
  if (typeof navigator !== "undefined" && navigator.clipboard && window.isSecureContext) {
    return navigator.clipboard.writeText(text);
  }
  return new Promise((resolve, reject) => {
    const area = document.createElement("textarea");
    area.value = text;
    area.setAttribute("aria-hidden", "true");
    area.style.position = "fixed";
    area.style.opacity = "0";
    document.body.appendChild(area);
    area.select();
    let ok = false;
    try {
      ok = document.execCommand("copy");
    } catch (error) {
      ok = false;
    }
    area.remove();
    if (ok) resolve();
    else reject(new Error("copy refused"));
  });
}

// Two small SVG charts: estimated against actual rows on log-log axes with the tenfold band,
// and the signed error by tree depth. Clicking a point selects its operator.
class SvgCharts {
  constructor(plan, onPick) {
    this.plan = plan;
    this.onPick = onPick;
    this.marks = [];
    const points = plan.nodes.filter((n) => n.judged && n.est_total !== null && n.est_total !== undefined
      && n.actual_total !== null && n.actual_total !== undefined);
    this.elements = [
      this.figure(this.scatter(points), [
        ["pv-key-band", "grey band: actual within ×10 of the estimate"], ["pv-key-diagonal", "dashed: estimate exact"],
        ["pv-key-origin", "ringed dot: origin"], [null, "dot colour: the error scale above"]]),
      this.figure(this.byDepth(points), [
        ["pv-key-band", "grey band: within ×10"], ["pv-key-diagonal", "dashed: on target"],
        ["pv-key-origin", "ringed dot: origin"], [null, "above the line: estimate too low"]]),
    ];
  }

  // A chart with its legend under it (HTML text, the page's font size).
  figure(chart, keys) {
    return el("figure", { class: "pv-chart-box" }, chart,
      el("figcaption", { class: "pv-chart-legend" }, keys.map(([cls, text]) =>
        el("span", { class: "pv-chart-key" }, cls ? el("span", { class: `pv-key-mark ${cls}`, "aria-hidden": "true" }) : "", text))));
  }

  frame(title, width, height) {
    const box = svg("svg", { viewBox: `0 0 ${width} ${height}`, width, height, class: "pv-chart", role: "img" });
    box.appendChild(svg("title", {}, title));
    box.addEventListener("click", (event) => {
      const id = event.target && event.target.getAttribute && event.target.getAttribute("data-id");
      if (id !== null && id !== undefined && id !== "") this.onPick(Number(id));
    });
    return box;
  }

  scatter(points) {
    const W = 380, H = 300, L = 58, R = 12, T = 24, B = 40;
    const box = this.frame("Estimated against actual rows (log-log); the band is within tenfold", W, H);
    const maxValue = Math.max(10, ...points.map((n) => Math.max(n.est_total, n.actual_total)));
    const top = Math.ceil(Math.log10(maxValue));
    const x = (v) => L + (Math.log10(Math.max(v, 1)) / top) * (W - L - R);
    const y = (v) => H - B - (Math.log10(Math.max(v, 1)) / top) * (H - T - B);
    box.appendChild(svg("text", { x: L, y: 15, class: "pv-chart-title" }, "estimated vs actual rows"));
    // tenfold band: actual between est / 10 and est x 10
    const band = [];
    const steps = 24;
    for (let i = 0; i <= steps; i++) {
      const e = Math.pow(10, (top * i) / steps);
      band.push([x(e), y(Math.min(e * 10, Math.pow(10, top)))]);
    }
    for (let i = steps; i >= 0; i--) {
      const e = Math.pow(10, (top * i) / steps);
      band.push([x(e), y(Math.max(e / 10, 1))]);
    }
    box.appendChild(svg("polygon", { points: band.map((p) => p.join(",")).join(" "), class: "pv-band" }));
    box.appendChild(svg("line", { x1: x(1), y1: y(1), x2: x(Math.pow(10, top)), y2: y(Math.pow(10, top)), class: "pv-diagonal" }));
    for (let k = 0; k <= top; k++) {
      const label = k === 0 ? "1" : k <= 3 ? String(Math.pow(10, k)) : `1e${k}`;
      box.appendChild(svg("line", { x1: x(Math.pow(10, k)), y1: H - B, x2: x(Math.pow(10, k)), y2: H - B + 4, class: "pv-axis" }));
      box.appendChild(svg("text", { x: x(Math.pow(10, k)), y: H - B + 16, class: "pv-tick", "text-anchor": "middle" }, label));
      box.appendChild(svg("line", { x1: L - 4, y1: y(Math.pow(10, k)), x2: L, y2: y(Math.pow(10, k)), class: "pv-axis" }));
      box.appendChild(svg("text", { x: L - 6, y: y(Math.pow(10, k)) + 4, class: "pv-tick", "text-anchor": "end" }, label));
    }
    box.appendChild(svg("line", { x1: L, y1: H - B, x2: W - R, y2: H - B, class: "pv-axis" }));
    box.appendChild(svg("line", { x1: L, y1: T, x2: L, y2: H - B, class: "pv-axis" }));
    box.appendChild(svg("text", { x: (L + W - R) / 2, y: H - 6, class: "pv-axis-label", "text-anchor": "middle" }, "estimated rows (in all)"));
    box.appendChild(svg("text", { x: 12, y: (T + H - B) / 2, class: "pv-axis-label", "text-anchor": "middle", transform: `rotate(-90 12 ${(T + H - B) / 2})` }, "actual rows (in all)"));
    this.plotPoints(box, points, (n) => x(n.est_total), (n) => y(n.actual_total));
    return box;
  }

  byDepth(points) {
    const W = 400, H = 300, L = 86, R = 12, T = 24, B = 40;
    const box = this.frame("Signed error by tree depth; the band is within tenfold", W, H);
    const maxDepth = Math.max(1, ...points.map((n) => n.depth ?? 0));
    const span = Math.max(2, Math.ceil(Math.max(...points.map((n) => Math.abs(n.log10_ratio)), 1)));
    const x = (d) => L + (d / maxDepth) * (W - L - R);
    const y = (r) => T + ((span - r) / (2 * span)) * (H - T - B);
    box.appendChild(svg("text", { x: L, y: 15, class: "pv-chart-title" }, "error by depth"));
    box.appendChild(svg("rect", { x: L, y: y(1), width: W - L - R, height: y(-1) - y(1), class: "pv-band" }));
    box.appendChild(svg("line", { x1: L, y1: y(0), x2: W - R, y2: y(0), class: "pv-diagonal" }));
    const labelEvery = span <= 5 ? 1 : Math.ceil(span / 5);  // at least 19 px between 11 px labels
    for (let k = -span; k <= span; k++) {
      if (k % labelEvery !== 0) continue;
      const label = k === 0 ? "on target" : `×10${k === 1 || k === -1 ? "" : superscript(Math.abs(k))} ${k > 0 ? "low" : "high"}`;
      box.appendChild(svg("line", { x1: L - 3, y1: y(k), x2: L, y2: y(k), class: "pv-axis" }));
      box.appendChild(svg("text", { x: L - 5, y: y(k) + 4, class: "pv-tick", "text-anchor": "end" }, label));
    }
    const tickEvery = Math.max(1, Math.ceil(maxDepth / 10));
    for (let d = 0; d <= maxDepth; d += tickEvery) {
      box.appendChild(svg("text", { x: x(d), y: H - B + 16, class: "pv-tick", "text-anchor": "middle" }, String(d)));
    }
    box.appendChild(svg("line", { x1: L, y1: H - B, x2: W - R, y2: H - B, class: "pv-axis" }));
    box.appendChild(svg("line", { x1: L, y1: T, x2: L, y2: H - B, class: "pv-axis" }));
    box.appendChild(svg("text", { x: (L + W - R) / 2, y: H - 6, class: "pv-axis-label", "text-anchor": "middle" }, "depth in the tree (0 = top)"));
    box.appendChild(svg("text", { x: 12, y: (T + H - B) / 2, class: "pv-axis-label", "text-anchor": "middle", transform: `rotate(-90 12 ${(T + H - B) / 2})` }, "error: actual / estimated"));
    this.plotPoints(box, points, (n) => x(n.depth ?? 0), (n) => y(n.log10_ratio));
    return box;
  }

  plotPoints(box, points, px, py) {
    const group = document.createElementNS(SVG_NS, "g");
    group.setAttribute("class", "pv-points");
    for (const n of points) {
      const mark = document.createElementNS(SVG_NS, "circle");
      mark.setAttribute("cx", px(n).toFixed(1));
      mark.setAttribute("cy", py(n).toFixed(1));
      mark.setAttribute("r", n.origin ? "5.5" : "3.5");
      mark.setAttribute("class", n.origin ? "pv-point pv-point-origin" : "pv-point");
      mark.setAttribute("data-id", String(n.id));
      mark.setAttribute("fill", ratioColour(n.log10_ratio));
      group.appendChild(mark);
    }
    box.appendChild(group);
    const readout = svg("text", { x: box.viewBox.baseVal.width - 8, y: 15, class: "pv-readout", "text-anchor": "end" });
    box.appendChild(readout);
    group.addEventListener("mouseover", (event) => {
      const id = event.target.getAttribute("data-id");
      const n = id === null ? null : this.plan.byId.get(Number(id));
      readout.textContent = n ? visible(`#${n.id} ${n.label || n.operator || ""}: est. ${formatRows(n.est_total)}, actual ${formatRows(n.actual_total)}`) : "";
    });
    group.addEventListener("mouseout", () => { readout.textContent = ""; });
    const ring = svg("circle", { r: 9, class: "pv-point-ring", visibility: "hidden" });
    box.appendChild(ring);
    this.marks.push({ ring, px, py });
  }

  highlight(id) {
    const node = this.plan.byId.get(id);
    const shown = node && node.judged && node.est_total !== null && node.est_total !== undefined
      && node.actual_total !== null && node.actual_total !== undefined;
    for (const { ring, px, py } of this.marks) {
      if (!shown) {
        ring.setAttribute("visibility", "hidden");
        continue;
      }
      ring.setAttribute("cx", px(node).toFixed(1));
      ring.setAttribute("cy", py(node).toFixed(1));
      ring.setAttribute("visibility", "visible");
    }
  }
}

function superscript(n) {
  const digits = "⁰¹²³⁴⁵⁶⁷⁸⁹";
  return String(n).split("").map((d) => digits[Number(d)]).join("");
}

// A stand-in for the widget model, for the exported page: the same get / set / on / off /
// save_changes / send calls, kept in memory.
export function localModel(state) {
  const handlers = new Map();
  return {
    get: (name) => state[name],
    set(name, value) {
      state[name] = value;
      for (const handler of handlers.get(`change:${name}`) || []) handler();
    },
    save_changes() {},
    send() {},
    on(name, handler) {
      if (!handlers.has(name)) handlers.set(name, []);
      handlers.get(name).push(handler);
    },
    off(name, handler) {
      const list = handlers.get(name) || [];
      const index = list.indexOf(handler);
      if (index >= 0) list.splice(index, 1);
    },
  };
}

export default { render };
