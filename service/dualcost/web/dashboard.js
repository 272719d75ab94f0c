// The dashboard: reads prices and a budget, sends POST /v1/comparisons, draws the answer.
// Plain JavaScript and inline SVG: no build step, no external resources, works offline.
"use strict";

const $ = (id) => document.getElementById(id);

function parseNumber(text, where) {
  const t = text.trim();
  if (!/^-?\d+(\.\d+)?([eE][-+]?\d+)?$/.test(t)) {
    throw new Error(`${where}: '${t}' is not a number (use '.' as the decimal point)`);
  }
  return Number(t);
}

// CSV with a header row: item,label,base_price,current_price, and base_share or base_quantity.
function parseTable(text) {
  const lines = text.split(/\r?\n/).map((l) => l.trim()).filter((l) => l.length > 0);
  if (lines.length < 2) throw new Error("Give a header row and at least one item.");
  const header = lines[0].split(",").map((h) => h.trim());
  const col = (name) => header.indexOf(name);
  for (const need of ["item", "base_price", "current_price"]) {
    if (col(need) < 0) throw new Error(`Row 1: the header has no column '${need}'.`);
  }
  const byShare = col("base_share") >= 0;
  if (!byShare && col("base_quantity") < 0) {
    throw new Error("Row 1: the header needs a 'base_share' or a 'base_quantity' column.");
  }
  const rows = lines.slice(1).map((line, i) => {
    const cells = line.split(",");
    if (cells.length !== header.length) {
      throw new Error(`Row ${i + 2}: ${cells.length} cells, but the header has ${header.length}.`);
    }
    const get = (name) => parseNumber(cells[col(name)], `Row ${i + 2}, column '${name}'`);
    return {
      id: cells[col("item")].trim(),
      label: col("label") >= 0 ? cells[col("label")].trim() : null,
      p0: get("base_price"),
      p1: get("current_price"),
      base: get(byShare ? "base_share" : "base_quantity"),
    };
  });
  return { rows, byShare };
}

function buildRequest() {
  const { rows, byShare } = parseTable($("data").value);
  const keyed = (f) => Object.fromEntries(rows.map((r) => [r.id, f(r)]));
  const base = { prices: keyed((r) => r.p0) };
  if (byShare) {
    base.shares = keyed((r) => r.base);
    base.expenditure = parseNumber($("expenditure").value, "Total base expenditure");
  } else {
    base.quantities = keyed((r) => r.base);
  }
  const family = $("family").value;
  const model = { family };
  if (["ces", "translog", "quadratic"].includes(family)) {
    model.sigma = parseNumber($("sigma").value, "Elasticity of substitution");
  }
  if (family === "stone_geary") model.frisch = parseNumber($("frisch").value, "Frisch parameter");
  return {
    items: rows.map((r) => ({ id: r.id, label: r.label })),
    base,
    current: { prices: keyed((r) => r.p1) },
    model,
  };
}

const fmt = (x, d = 4) => (x === null || x === undefined ? "" : Number(x).toFixed(d));

function svg(tag, attrs, text) {
  const el = document.createElementNS("http://www.w3.org/2000/svg", tag);
  for (const [k, v] of Object.entries(attrs)) el.setAttribute(k, v);
  if (text !== undefined) el.textContent = text;
  return el;
}

// Horizontal bars from a common origin; a dashed reference line where one is given.
function barChart(node, entries, { origin = 0, reference = null, digits = 4 } = {}) {
  node.replaceChildren();
  const rowH = 22, left = 170, right = 80, width = 800;
  const height = entries.length * rowH + 30;
  node.setAttribute("viewBox", `0 0 ${width} ${height}`);
  node.setAttribute("height", height);
  const values = entries.map((e) => e.value).concat([origin, reference ?? origin]);
  const lo = Math.min(...values), hi = Math.max(...values);
  const span = hi - lo || 1;
  const x = (v) => left + ((v - lo) / span) * (width - left - right);
  entries.forEach((e, i) => {
    const y = 10 + i * rowH;
    node.append(svg("text", { x: left - 6, y: y + 14, "text-anchor": "end", "font-size": 12 }, e.label));
    const a = x(Math.min(origin, e.value)), b = x(Math.max(origin, e.value));
    node.append(svg("rect", { x: a, y: y + 3, width: Math.max(b - a, 1), height: rowH - 8,
      fill: e.value >= origin ? "#3f6fb5" : "#c0573e" }));
    node.append(svg("text", { x: b + 4, y: y + 14, "font-size": 11 }, fmt(e.value, digits)));
  });
  if (reference !== null) {
    node.append(svg("line", { x1: x(reference), x2: x(reference), y1: 4, y2: height - 14,
      stroke: "#222", "stroke-dasharray": "4 3" }));
    node.append(svg("text", { x: x(reference), y: height - 2, "font-size": 11, "text-anchor": "middle" },
      `Konüs ${fmt(reference)}`));
  }
}

function fillTable(id, rows) {
  const body = $(id).querySelector("tbody");
  body.replaceChildren(...rows.map((cells) => {
    const tr = document.createElement("tr");
    for (const c of cells) {
      const td = document.createElement("td");
      td.textContent = c;
      tr.append(td);
    }
    return tr;
  }));
}

const WITHHELD = "not a result";

// The model's own figures, or a plain "not a result" where the model is outside its regular
// region (the answer then gives null for them and says why in answer.validity).
function modelFigure(node, value, digits, regular) {
  node.textContent = regular ? fmt(value, digits) : WITHHELD;
  node.classList.toggle("withheld", !regular);
}

function showValidity(validity) {
  const box = $("validity");
  if (validity.regular) {
    box.hidden = true;
    box.replaceChildren();
    return;
  }
  const title = document.createElement("strong");
  title.textContent = "The model is outside its regular region at these prices: its Konüs "
    + "index, compensation and biases are not results. Do not use them.";
  const reasons = document.createElement("ul");
  reasons.append(...validity.reasons.map((r) => {
    const li = document.createElement("li");
    li.textContent = r.message;
    return li;
  }));
  const usable = document.createElement("p");
  usable.textContent = validity.usable;
  box.replaceChildren(title, reasons, usable);
  box.hidden = false;
}

function render(answer) {
  const formulas = Object.fromEntries(answer.formulas.map((f) => [f.formula, f]));
  const regular = answer.validity.regular;
  showValidity(answer.validity);
  modelFigure($("konus-base"), answer.konus.base, 4, regular);
  $("laspeyres").textContent = formulas.laspeyres ? fmt(formulas.laspeyres.value) : "";
  modelFigure($("bias"), answer.laspeyres_gap_points, 3, regular);
  modelFigure($("cv"), answer.compensation.compensating_variation, 2, regular);
  $("homothetic").textContent = !regular ? ""
    : answer.konus.homothetic
      ? "The model is homothetic: the Konüs index is the same at every living standard."
      : `Konüs index at the current living standard: ${fmt(answer.konus.current)}.`;
  barChart($("formula-chart"), answer.formulas.map((f) => ({ label: f.title, value: f.value })),
    { origin: 1, reference: regular ? answer.konus.base : null });
  const model = (x, d) => (regular ? fmt(x, d) : WITHHELD);
  fillTable("formula-table", answer.formulas.map((f) =>
    [f.title, fmt(f.value), f.compared_with, model(f.konus, 4), model(f.bias_points, 3),
      model(f.bias_percent, 3)]));
  const items = answer.by_item.slice();
  if (regular) items.sort((a, b) => b.laspeyres_gap_points - a.laspeyres_gap_points);
  $("item-chart").hidden = !regular;
  if (regular) {
    barChart($("item-chart"), items.map((i) => ({ label: i.label || i.item, value: i.laspeyres_gap_points })),
      { digits: 3 });
  }
  fillTable("item-table", items.map((i) => [i.label || i.item, fmt(i.price_relative),
    fmt(i.base_quantity, 3), model(i.compensated_quantity, 3), model(i.substitution_effect, 3),
    model(i.income_effect, 3), model(i.laspeyres_gap_points, 3)]));
  $("notices").replaceChildren(...answer.notices.map((n) => {
    const li = document.createElement("li");
    li.textContent = n.message;
    return li;
  }));
  $("results").hidden = false;
}

function showError(text) {
  $("error").textContent = text;
  $("error").hidden = !text;
}

async function compute() {
  showError("");
  let request;
  try {
    request = buildRequest();
  } catch (e) {
    showError(e.message);
    return;
  }
  const response = await fetch("/v1/comparisons", {
    method: "POST",
    headers: { "content-type": "application/json", accept: "application/json" },
    body: JSON.stringify(request),
  });
  const body = await response.json();
  if (!response.ok) {
    const lines = (body.errors || []).map((e) => `${e.pointer}: ${e.detail}`);
    showError([body.title || "The request was refused", ...lines].join("\n"));
    $("results").hidden = true;
    return;
  }
  render(body);
}

async function loadExample() {
  const demo = await (await fetch("/v1/demo")).json();
  const req = demo.request;
  const lines = ["item,label,base_price,current_price,base_quantity"];
  for (const it of req.items) {
    const id = typeof it === "string" ? it : it.id;
    const label = (typeof it === "string" ? id : it.label || id).replaceAll(",", ";");
    lines.push([id, label, req.base.prices[id], req.current.prices[id], req.base.quantities[id]].join(","));
  }
  $("data").value = lines.join("\n");
  $("family").value = "ces";
  $("sigma").value = "0.7";
  syncModelFields();
}

function syncModelFields() {
  const family = $("family").value;
  $("sigma-label").hidden = !["ces", "translog", "quadratic"].includes(family);
  $("frisch-label").hidden = family !== "stone_geary";
}

$("compute").addEventListener("click", () => compute().catch((e) => showError(String(e))));
$("load-example").addEventListener("click", () => loadExample().catch((e) => showError(String(e))));
$("family").addEventListener("change", syncModelFields);
$("file").addEventListener("change", async (event) => {
  const file = event.target.files[0];
  if (file) $("data").value = await file.text();
});
syncModelFields();
