// The workspace engine: turns a view declaration (views.js) into a form, a request, a located
// error or a drawn answer. It knows no operation by name; everything an operation needs is in its
// declaration. Plain JavaScript, no build step, nothing fetched from another host.
"use strict";

const $ = (id) => document.getElementById(id);
const el = (tag, attrs = {}, ...children) => {
  const node = document.createElement(tag);
  for (const [k, v] of Object.entries(attrs)) {
    if (v === null || v === undefined || v === false) continue;
    if (k === "text") node.textContent = v;
    else if (k.startsWith("on")) node.addEventListener(k.slice(2), v);
    else node.setAttribute(k, v === true ? "" : v);
  }
  node.append(...children.filter((c) => c !== null && c !== undefined));
  return node;
};

// ---- JSON pointers (RFC 6901) -------------------------------------------------------------
const segments = (ptr) => (ptr === "" ? [] : ptr.slice(1).split("/")
  .map((s) => s.replaceAll("~1", "/").replaceAll("~0", "~")));
const escape = (s) => String(s).replaceAll("~", "~0").replaceAll("/", "~1");
function getAt(doc, ptr) {
  let node = doc;
  for (const s of segments(ptr)) {
    if (node === null || typeof node !== "object") return undefined;
    node = node[Array.isArray(node) ? Number(s) : s];
  }
  return node;
}
function setAt(doc, ptr, value) {
  const parts = segments(ptr);
  let node = doc;
  parts.slice(0, -1).forEach((s, i) => {
    const key = Array.isArray(node) ? Number(s) : s;
    if (node[key] === undefined || node[key] === null) {
      node[key] = /^\d+$/.test(parts[i + 1]) ? [] : {};
    }
    node = node[key];
  });
  node[Array.isArray(node) ? Number(parts.at(-1)) : parts.at(-1)] = value;
}
function deleteAt(doc, ptr) {
  const parts = segments(ptr);
  const parent = getAt(doc, parts.slice(0, -1).length ? "/" + parts.slice(0, -1).map(escape).join("/") : "");
  if (Array.isArray(parent)) {
    if (/^\d+$/.test(parts.at(-1))) parent[Number(parts.at(-1))] = null;  // an empty cell of a matrix
  }
  else if (parent && typeof parent === "object") delete parent[parts.at(-1)];
}
const parentOf = (ptr) => ptr.slice(0, ptr.lastIndexOf("/"));
const fill = (template, vars) => template.replace(/\{(\w+)\}/g, (_, k) => escape(vars[k]));

// A cell's pointer in this request: where the request gives a vector as a list in item order
// rather than an object keyed by item id, the item's position stands in for its id.
function cellPointer(template, vars, body) {
  const parts = segments(fill(template, vars));
  let node = body;
  const out = parts.map((s) => {
    let seg = s;
    if (Array.isArray(node) && !/^\d+$/.test(s)) {
      seg = String(s === String(vars.col) ? vars.c : vars.r);
    }
    node = node === undefined || node === null ? undefined : node[Array.isArray(node) ? Number(seg) : seg];
    return seg;
  });
  return "/" + out.map(escape).join("/");
}
const clone = (x) => JSON.parse(JSON.stringify(x));

// ---- numbers as a person types them ---------------------------------------------------------
class Located extends Error {}
function readNumber(text, where) {
  const t = String(text).trim();
  if (/^[-+]?\d+,\d+$/.test(t)) {
    throw new Located(`${where}: '${t}' has a decimal comma; write ${t.replace(",", ".")} `
      + "(this page reads '.' as the decimal point).");
  }
  if (!/^[-+]?(\d+\.?\d*|\.\d+)([eE][-+]?\d+)?$/.test(t)) {
    throw new Located(`${where}: '${t}' is not a number.`);
  }
  return Number(t);
}

// ---- the state: one view, its scenario (the request body) and the places of its inputs --------
const state = { views: [], view: null, body: null, places: [], answer: null, catalogue: null,
  scenario: "", origin: new Map(), started: null };

// Where the service asks for an API key, the one typed in the header goes with every /v1 request
// (kept for this tab only, in sessionStorage).
function headers(accept, json = false) {
  const out = { accept };
  if (json) out["content-type"] = "application/json";
  const key = sessionStorage.getItem("dualcost-api-key");
  if (key) out["x-api-key"] = key;
  return out;
}

async function getJson(url) {
  const response = await fetch(url, { headers: headers("application/json") });
  if (response.status === 401) {
    throw new Error(`${url} answered 401: the service asks for an API key; type it in the box at the top.`);
  }
  if (!response.ok) throw new Error(`${url} answered ${response.status}`);
  return response.json();
}

// The service's own examples: /v1/demo for the comparison, /openapi.json for every operation.
async function loadCatalogue() {
  const [families, formulas, openapi] = await Promise.all([
    getJson("/v1/preference-families"), getJson("/v1/index-formulas"), getJson("/openapi.json")]);
  const examples = {};
  for (const item of Object.values(openapi.paths || {})) {
    for (const op of Object.values(item)) {
      const found = op?.requestBody?.content?.["application/json"]?.examples;
      if (op.operationId && found) examples[op.operationId] = found;
    }
  }
  return { families, formulas, examples };
}

function scenarios(view) {
  const out = [];
  if (view.demo) out.push({ id: "demo", title: "Wrenmouth demo (GET /v1/demo)" });
  // A view whose operation has no example of its own starts from what it builds (view.start).
  if (view.start) out.push({ id: "start", title: view.start.title });
  const found = state.catalogue.examples[view.operationId] || {};
  for (const [name, ex] of Object.entries(found)) {
    out.push({ id: `example:${name}`, title: `Example: ${ex.summary || name}` });
  }
  return out;
}

async function loadScenario(id) {
  const view = state.view;
  let body;
  if (id === "demo") body = (await getJson(view.demo)).request;
  else if (id === "start") body = await view.start.body(state.catalogue);
  else body = state.catalogue.examples[view.operationId][id.slice("example:".length)].value;
  state.body = clone(body);
  state.scenario = id;
  state.origin = new Map();
  state.started = null;
  renderForm();
}

// ---- the form ------------------------------------------------------------------------------
function place(entry) {
  state.places.push(entry);
  // A value typed over one read from a file no longer comes from the file.
  entry.input.addEventListener("input", () => state.origin.delete(entry.pointer));
  return entry.input;
}

// Where a value came from in an uploaded file, said beside the grid's own row and column.
const fromFile = (pointer) => (state.origin.has(pointer) ? ` (from ${state.origin.get(pointer)})` : "");

function fieldInput(field, body, prefix) {
  const value = getAt(body, field.pointer);
  const id = `${prefix}-${field.pointer.replace(/[^a-z0-9]/gi, "_")}`;
  let input;
  if (field.kind === "checkbox") {
    input = el("input", { id, type: "checkbox", checked: value === true });
    const wrap = el("div", { class: "field check" }, el("label", { class: "check", for: id }, input, ` ${field.label}`),
      field.hint ? el("small", { text: field.hint }) : null);
    place({ pointer: field.pointer, kind: "checkbox", optional: true, input, where: field.label });
    return wrap;
  }
  if (field.kind === "json") {
    input = el("textarea", { id, rows: field.rows || 4, spellcheck: "false" });
    input.value = value === undefined ? "" : JSON.stringify(value);
  } else if (field.kind === "select") {
    input = el("select", { id });
    const options = typeof field.options === "function" ? field.options(state.catalogue, body) : field.options;
    if (field.optional) input.append(el("option", { value: "", text: field.empty || "(service default)" }));
    for (const [v, label] of options) input.append(el("option", { value: v, text: label, selected: v === value }));
  } else {
    input = el("input", { id, type: "text", inputmode: field.kind === "number" ? "decimal" : null,
      value: value === undefined || value === null ? "" : (Array.isArray(value) ? value.join(", ") : String(value)),
      spellcheck: "false" });
  }
  const label = el("label", { for: id, text: field.label });
  const wrap = el("div", { class: field.kind === "json" ? "field wide" : "field" }, label, input,
    field.hint ? el("small", { text: field.hint }) : null);
  place({ pointer: field.pointer, kind: field.kind, optional: field.optional, input, where: field.label,
    pruneParent: field.prune });
  return wrap;
}

function formulasField(field, body) {
  const scope = field.scope;
  const chosen = new Set(getAt(body, field.pointer) || []);
  const box = el("fieldset", { class: "formulas" }, el("legend", { text: field.label }));
  const inputs = [];
  for (const f of state.catalogue.formulas.filter((x) => x.operations.includes(scope))) {
    const input = el("input", { type: "checkbox", value: f.formula, id: `formula-${f.formula}`,
      checked: chosen.has(f.formula) });
    inputs.push(input);
    box.append(el("label", { class: "check", for: `formula-${f.formula}` }, input, ` ${f.title}`));
  }
  box.append(el("small", { text: "None ticked: every formula the data allow." }));
  place({ pointer: field.pointer, kind: "formulas", input: box, inputs, where: field.label });
  return box;
}

// A grid: rows from a list in the body, columns fixed or from another list; each cell a pointer.
function gridBlock(grid, body) {
  // Rows from a list in the request, or from the declaration's own reading of it (a tree's nodes).
  const rows = (grid.rows.list ? grid.rows.list(body) : getAt(body, grid.rows.pointer)) || [];
  const rowKey = grid.rows.key || ((x) => (typeof x === "object" ? x.id : x));
  const rowLabel = grid.rows.label || ((x) => (typeof x === "object" ? x.label || x.id : x));
  let columns = grid.columns || [];
  if (grid.columnsFrom) {
    const list = (grid.columnsFrom.list ? grid.columnsFrom.list(body) : getAt(body, grid.columnsFrom.pointer)) || [];
    columns = columns.concat(list.map((x, c) => ({ title: typeof x === "object" ? x.label || x.id : x,
      key: typeof x === "object" ? x.id : x, c, pointer: grid.columnsFrom.cell })));
  }
  const head = el("tr", {}, el("th", { scope: "col", text: grid.rows.title }),
    ...columns.map((c) => el("th", { scope: "col", text: c.title })), grid.add ? el("th", { scope: "col", text: "" }) : null);
  const tbody = el("tbody");
  rows.forEach((row, r) => {
    const key = rowKey(row, r);
    const tr = el("tr", {}, el("th", { scope: "row", text: rowLabel(row, r) }));
    for (const col of columns) {
      const pointer = typeof col.pointer === "function" ? col.pointer(row, r)
        : cellPointer(col.pointer, { row: key, r, col: col.key, c: col.c }, body);
      const value = getAt(body, pointer);
      const aria = `${grid.title}: ${rowLabel(row, r)}, ${col.title}`;
      let input;
      if (col.kind === "select") {
        input = el("select", { "aria-label": aria }, el("option", { value: "", text: "(none)" }),
          ...col.options.map((o) => el("option", { value: o, text: o, selected: o === value })));
      } else {
        input = el("input", { type: "text", inputmode: col.kind === "text" ? null : "decimal",
          value: value === undefined || value === null ? "" : String(value), "aria-label": aria, size: 7 });
      }
      const rowWhere = `${grid.title}, row ${r + 1} (${rowLabel(row, r)})`;
      place({ pointer, kind: col.kind === "select" ? "text" : col.kind || "number", optional: true, input,
        pruneParent: !col.keep, rowWhere, where: `${rowWhere}, column '${col.title}'` });
      tr.append(el("td", {}, input));
    }
    if (grid.add) {
      tr.append(el("td", {}, el("button", { type: "button", text: "remove", "aria-label": `remove ${rowLabel(row, r)}`,
        onclick: () => { commit(); getAt(state.body, grid.rows.pointer).splice(r, 1); renderForm(); } })));
    }
    tbody.append(tr);
  });
  // A grid of records (clauses) can gain a row, started from the declaration's template.
  const add = grid.add ? el("button", { type: "button", text: grid.add.text, onclick: () => {
    commit(); const list = getAt(state.body, grid.rows.pointer) || [];
    list.push(grid.add.row(list)); setAt(state.body, grid.rows.pointer, list); renderForm(); } }) : null;
  return el("section", { class: "grid" }, el("h3", { text: grid.title }),
    grid.hint ? el("p", { class: "hint", text: grid.hint }) : null,
    el("div", { class: "scroll", tabindex: "0", role: "region", "aria-label": grid.title },
      el("table", {}, el("thead", {}, head), tbody)), add);
}

// The nested-CES tree: each group's name and σ, its items and subgroups; groups can be added or
// removed. Its inputs are places like any other (/model/tree/children/0/sigma ...).
function treeEditor(pointer, body) {
  const root = getAt(body, pointer);
  const items = (body.items || []).map((x) => (typeof x === "object" ? x.id : x));
  const box = el("div", { class: "tree" });
  if (!root) return box;
  const node = (ptr, depth) => {
    const group = getAt(body, ptr);
    const name = el("input", { type: "text", value: group.name || "", "aria-label": `group name at ${ptr}` });
    const sigma = el("input", { type: "text", inputmode: "decimal", size: 5,
      value: group.sigma ?? "", "aria-label": `σ of ${group.name || "group"}` });
    place({ pointer: `${ptr}/name`, kind: "text", input: name, where: `Tree group '${group.name}', name` });
    place({ pointer: `${ptr}/sigma`, kind: "number", optional: true, input: sigma,
      where: `Tree group '${group.name}', σ` });
    const leaves = (group.children || []).filter((c) => typeof c === "string");
    const leafInput = el("input", { type: "text", value: leaves.join(", "),
      "aria-label": `items directly in ${group.name}` });
    const li = el("li", { class: "tree-node" },
      el("div", { class: "tree-row" }, el("label", {}, "group ", name), el("label", {}, "σ ", sigma),
        el("label", {}, "items ", leafInput),
        el("button", { type: "button", text: "+ subgroup", onclick: () => {
          commit(); getAt(state.body, ptr).children.push({ name: "new group", sigma: 1, children: [] });
          renderForm(); } }),
        depth > 0 ? el("button", { type: "button", text: "remove", onclick: () => {
          commit(); const parent = getAt(state.body, parentOf(parentOf(ptr)));
          const [removed] = parent.children.splice(Number(ptr.split("/").at(-1)), 1);
          parent.children.push(...flattenLeaves(removed)); renderForm(); } }) : null));
    leafInput.dataset.treePtr = ptr;
    place({ pointer: `${ptr}/children`, kind: "leaves", input: leafInput, known: items,
      where: `Tree group '${group.name}', items` });
    const sub = el("ul");
    (group.children || []).forEach((c, i) => {
      if (typeof c === "object") sub.append(node(`${ptr}/children/${i}`, depth + 1));
    });
    if (sub.children.length) li.append(sub);
    return li;
  };
  box.append(el("ul", {}, node(pointer, 0)),
    el("small", { text: "Items: ids separated by commas. Every item must appear once in the tree." }));
  return box;
}
const flattenLeaves = (g) => (typeof g === "string" ? [g] : (g.children || []).flatMap(flattenLeaves));

function modelBlock(field, body) {
  const family = getAt(body, `${field.pointer}/family`);
  const families = state.catalogue.families.filter((f) => !field.families || field.families.includes(f.family));
  const select = el("select", { id: "family" });
  for (const f of families) {
    select.append(el("option", { value: f.family, text: `${f.title.split(":")[0]} (${f.family})`, selected: f.family === family }));
  }
  select.addEventListener("change", () => {
    commit();
    const generated = field.shares && GENERATED[select.value];
    const start = STARTS[select.value];
    const made = generated ? generated(startShares(state.body, field)) : null;
    setAt(state.body, field.pointer, made ? made.model : start ? start(state.body) : { family: select.value });
    state.started = made ? { family: select.value, note: made.note } : null;
    renderForm();
  });
  const spec = families.find((f) => f.family === family);
  const started = state.started && state.started.family === family ? state.started.note : null;
  const wrap = el("fieldset", { class: "model" }, el("legend", { text: field.label }),
    el("div", { class: "field" }, el("label", { for: "family", text: "Preference family" }), select,
      spec ? el("small", { text: `${spec.title}. ${spec.source}.` }) : null),
    started ? el("p", { class: "start-note", id: "model-start-note", role: "note", text: started }) : null);
  for (const p of spec ? spec.parameters : []) {
    if (["service", "python"].includes(p.shape)) continue;
    const pointer = `${field.pointer}/${p.name}`;
    if (p.shape === "number") {
      wrap.append(fieldInput({ pointer, label: p.name === "sigma" ? "σ (elasticity of substitution)" : p.name,
        kind: "number", optional: true, hint: p.description }, body, "model"));
    } else if (p.shape === "tree") {
      wrap.append(el("p", { class: "hint", text: "The tree of groups, each with its own σ." }),
        treeEditor(pointer, body));
    } else {
      const value = getAt(body, pointer);
      const input = el("textarea", { rows: 3, spellcheck: "false", "aria-label": `${p.name} (JSON)` });
      input.value = value === undefined ? "" : JSON.stringify(value);
      place({ pointer, kind: "json", optional: true, input, where: `Model parameter '${p.name}'` });
      wrap.append(el("label", { class: "field" }, `${p.name} (${p.shape}, JSON)`, input));
    }
  }
  return wrap;
}

// Start values when the family changes: simple families start from plain values; the others
// from their own example (listed in the scenario menu), or empty parameters to fill in.
const STARTS = {
  cobb_douglas: () => ({ family: "cobb_douglas" }),
  ces: () => ({ family: "ces", sigma: 0.7 }),
  translog: () => ({ family: "translog", sigma: 0.7 }),
  quadratic: () => ({ family: "quadratic", sigma: 0.7 }),
  stone_geary: () => ({ family: "stone_geary", frisch: -2 }),
  nested_ces: (body) => {
    const ids = (body.items || []).map((x) => (typeof x === "object" ? x.id : x));
    const half = Math.ceil(ids.length / 2);
    return { family: "nested_ces", tree: { name: "all items", sigma: 0.5, children: [
      { name: "first group", sigma: 1.2, children: ids.slice(0, half) },
      { name: "second group", sigma: 1.2, children: ids.slice(half) }] } };
  },
};

// Generated starts for the families with no plain default (AIDS, QUAIDS, a utility formula, demand
// formulas), from the items of the grid: a view's model field gives `shares(body)`, the base
// budget shares it observes by item id (null: none). Each start is the Cobb-Douglas special case
// of its family with those shares, valid and regular at every price; the note says so.
const ROUND = 1e6;
function startShares(body, field) {
  const given = field.shares(body);
  // The items the shares name (a series' model is over the items priced in its base period), else all.
  const ids = given ? Object.keys(given) : (body.items || []).map((x) => (typeof x === "object" ? x.id : x));
  const raw = given ? ids.map((id) => Number(given[id])) : [];
  const total = raw.reduce((a, b) => a + b, 0);
  const observed = raw.length > 0 && raw.every((x) => Number.isFinite(x) && x >= 0) && total > 0;
  const w = ids.map((_, k) => Math.round(ROUND * (observed ? raw[k] / total : 1 / ids.length)) / ROUND);
  // Rounded to 6 decimals, the largest takes the remainder: they sum to 1 (adding-up).
  const top = w.indexOf(Math.max(...w));
  if (top >= 0) w[top] = Math.round(ROUND * (w[top] + 1 - w.reduce((a, b) => a + b, 0))) / ROUND;
  return { ids, w, observed, given: Boolean(given) };
}
const sharesSaid = (s) => (s.observed ? "the base budget shares observed in the grid (rounded to 6 decimals)"
  : "equal shares (the grid gives no base quantities or shares to take them from)");
const RESERVED = new Set(["exp", "log", "sqrt", "min", "max", "income"]);
const nameOf = (id) => (/^[A-Za-z_][A-Za-z0-9_]*$/.test(id) && !RESERVED.has(id) ? id : `'${id}'`);
const keyed = (ids, f) => Object.fromEntries(ids.map((id, k) => [id, f(id, k)]));
function demandSystemStart(s, quadratic) {
  const model = { family: quadratic ? "quaids" : "aids" };
  // A view without one base bundle (households: one per household) leaves α to the service,
  // which calibrates it to each base budget's own shares.
  if (s.given) model.alpha = keyed(s.ids, (_, k) => s.w[k]);
  Object.assign(model, { alpha0: 0, beta: keyed(s.ids, () => 0), gamma: {} });
  if (quadratic) model.lambda = keyed(s.ids, () => 0);
  const alpha = s.given ? `α = ${sharesSaid(s)}` : "α left out: the service calibrates it to each base budget's own shares";
  return { model, note: `Starting values, to be edited: ${alpha}; β = 0${quadratic ? ", λ = 0" : ""}; γ = 0 ({}: every γij left out is 0); `
    + "α0 = 0 and β0 = 1 (its default). The price index a(p) is the model's own translog one, ln a(p) = α0 + Σ αk ln pk "
    + "+ ½ ΣΣ γkj ln pk ln pj (not Stone's approximation). With β = γ = 0"
    + `${quadratic ? " and λ = 0 (Banks, Blundell and Lewbel 1997)" : ""} the shares are α at every price and income: `
    + "a Cobb-Douglas model, valid and regular everywhere (Deaton and Muellbauer 1980). Give γ (symmetric, rows and columns "
    + `summing to 0) and β${quadratic ? " and λ" : ""} (summing to 0) for substitution and income effects.` };
}
const GENERATED = {
  aids: (s) => demandSystemStart(s, false),
  quaids: (s) => demandSystemStart(s, true),
  utility_formula: (s) => ({
    model: { family: "utility_formula", utility_formula: s.ids.map((id, k) => [s.w[k], id]).filter(([w]) => w > 0)
      .map(([w, id]) => `${w}*log(${nameOf(id)})`).join(" + ") },
    note: `Starting values, to be edited: the Cobb-Douglas utility Σ wi log(xi), wi = ${sharesSaid(s)}, each item id standing `
      + "for its quantity: the simplest formula the family accepts, quasi-concave, spending the shares w at any prices. "
      + "Write your own utility over the items' ids (quote an id that is not a plain name: 'my item')." }),
  demand_system: (s) => ({
    model: { family: "demand_system", form: "formula", demand_formulas: keyed(s.ids, (id, k) => `${s.w[k]}*income/${nameOf(id)}`) },
    note: `Starting values, to be edited: the Cobb-Douglas demands xi = wi · income / pi, wi = ${sharesSaid(s)}, each item id `
      + "standing for its price: they spend the income exactly and are integrable (a symmetric, negative semidefinite Slutsky "
      + "matrix), so the expenditure function found along the price path is the Cobb-Douglas one. Write your own demands." }),
};

function renderForm() {
  const view = state.view;
  state.places = [];
  const body = state.body;
  const form = $("form");
  const picker = el("select", { id: "scenario" });
  for (const s of scenarios(view)) picker.append(el("option", { value: s.id, text: s.title, selected: s.id === state.scenario }));
  const file = el("input", { id: "upload", type: "file", accept: ".csv,text/csv,.parquet,application/vnd.apache.parquet" });
  file.addEventListener("change", () => uploadCsv(file).catch(showFailure));
  const parts = [
    el("div", { class: "row" },
      el("div", { class: "field" }, el("label", { for: "scenario", text: "Start from" }), picker),
      el("button", { type: "button", id: "load", text: "Load", onclick: () => loadScenario(picker.value).catch(showFailure) }),
      view.csv ? el("div", { class: "field" }, el("label", { for: "upload", text: `Upload CSV or Parquet (${view.csv.columns})` }), file) : null),
    view.note ? el("p", { class: "hint", text: view.note }) : null,
  ];
  const fields = el("div", { class: "fields" });
  for (const f of view.fields || []) {
    if (f.when && !f.when(body)) continue;
    if (f.kind === "model") parts.push(modelBlock(f, body));
    else if (f.kind === "formulas") parts.push(formulasField(f, body));
    else fields.append(fieldInput(f, body, view.id));
  }
  parts.push(fields);
  for (const g of view.grids || []) if (!g.when || g.when(body)) parts.push(gridBlock(g, body));
  const json = el("textarea", { id: "request-json", rows: 10, spellcheck: "false", "aria-label": "the request as JSON" });
  json.value = JSON.stringify(body, null, 1);
  parts.push(el("details", { class: "advanced" }, el("summary", { text: "The request as JSON (every field of the operation)" }),
    json, el("button", { type: "button", text: "Use this JSON", onclick: () => {
      try { state.body = JSON.parse(json.value); renderForm(); } catch (e) { showError([`The request JSON: ${e.message}`]); }
    } })));
  if (view.extras) parts.push(...view.extras(body));
  // Any operation can keep its run (save=true): off by default, on for this tab once ticked.
  const keep = view.saves === false ? null : el("label", { class: "keep-run", for: "save-run" },
    el("input", { type: "checkbox", id: "save-run", checked: sessionStorage.getItem("dualcost-save") === "1",
      onchange: (e) => sessionStorage.setItem("dualcost-save", e.target.checked ? "1" : "0") }),
    " Keep this run (save=true): the input, answer and version, to open or re-run later under Saved runs");
  parts.push(el("div", { class: "row actions" },
    el("button", { type: "submit", id: "compute", class: "primary", text: view.action || "Compute" }), keep));
  form.replaceChildren(...parts.filter(Boolean));
}

// Read every input into the body; collect the located problems instead of stopping at the first.
function commit({ strict = false } = {}) {
  const body = clone(state.body);
  const problems = [];
  // A tree group's items are read last, deepest first: its subgroups' places keep their indices.
  const depth = (p) => (p.kind === "leaves" ? 1e6 - p.pointer.length : 0);
  const order = state.places.slice().sort((a, b) => depth(a) - depth(b));
  for (const p of order) {
    try {
      const value = readPlace(p, body);
      if (value === undefined) deleteAt(body, p.pointer);
      else setAt(body, p.pointer, value);
      p.input.removeAttribute("aria-invalid");
    } catch (e) {
      if (!(e instanceof Located)) throw e;
      problems.push({ place: p, message: e.message });
    }
  }
  for (const p of state.places) {
    if (!p.pruneParent) continue;
    const parent = getAt(body, parentOf(p.pointer));
    if (parent && !Array.isArray(parent) && typeof parent === "object" && Object.keys(parent).length === 0) {
      deleteAt(body, parentOf(p.pointer));
    }
  }
  if (strict && problems.length) return { body: null, problems };
  if (!problems.length) state.body = body;
  return { body, problems };
}

function readPlace(p, body) {
  if (p.kind === "formulas") {
    const ticked = p.inputs.filter((i) => i.checked).map((i) => i.value);
    return ticked.length ? ticked : undefined;
  }
  if (p.kind === "checkbox") return p.input.checked ? true : undefined;
  const text = p.input.value.trim();
  if (text === "" && p.optional) return undefined;
  if (p.kind === "number") return readNumber(text, p.where);
  // A list of numbers separated by commas (a decimal comma cannot be told apart here: say so).
  if (p.kind === "numbers") {
    return text.split(/\s*,\s*|\s+/).filter(Boolean).map((t, k) => readNumber(t, `${p.where}, number ${k + 1}`));
  }
  if (p.kind === "json") {
    try { return JSON.parse(text); } catch (e) { throw new Located(`${p.where}: not valid JSON (${e.message}).`); }
  }
  if (p.kind === "leaves") {
    const ids = text.split(",").map((s) => s.trim()).filter(Boolean);
    const unknown = ids.filter((id) => !p.known.includes(id));
    if (unknown.length) throw new Located(`${p.where}: ${unknown.join(", ")} is not an item of this request.`);
    // Items kept stay where they were (the order of a tree's children is the person's own);
    // items removed go, new ones are appended after the groups and items already there.
    const children = (getAt(body, p.pointer) || []).filter((c) => typeof c === "object" || ids.includes(c));
    return [...children, ...ids.filter((id) => !children.includes(id))];
  }
  return text;
}

// ---- computing and the answer ----------------------------------------------------------------
async function compute() {
  showError([]);
  const { body, problems } = commit({ strict: true });
  if (problems.length) {
    problems.forEach((p) => p.place.input.setAttribute("aria-invalid", "true"));
    showError(problems.map((p) => p.message), problems[0].place.input);
    return;
  }
  say("Computing…");
  const save = $("save-run") && $("save-run").checked;
  // A view that is more than one POST (a job, a listing) says how it is answered: view.submit.
  const { ok, answer, run } = state.view.submit ? await state.view.submit(body, { save, headers })
    : await post(state.view.path + (save ? "?save=true" : ""), body);
  $("status").textContent = "";
  if (!ok) {
    showProblem(answer);
    return;
  }
  state.answer = answer;
  state.sent = body;
  state.run = run || null;
  renderAnswer(answer);
}

async function post(path, body) {
  const response = await fetch(path, { method: "POST",
    headers: headers("application/json", true), body: JSON.stringify(body) });
  return { ok: response.ok, answer: await response.json(), run: response.headers.get("Dualcost-Run") };
}

// The run kept (save=true): its id, a link to its record and a way to open it in Saved runs.
function runLine() {
  if (!state.run) return null;
  const runs = state.views.find((v) => v.id === "runs");
  return el("p", { id: "run-saved", class: "saved", role: "note" }, "Kept as run ",
    el("a", { href: `/v1/runs/${state.run}`, id: "run-link", text: state.run }), ". ",
    runs ? el("button", { type: "button", id: "open-run", text: "Open it in Saved runs", onclick: () => {
      state.pendingRun = state.run; history.replaceState(null, "", "#runs"); showView("runs").catch(showFailure); } }) : null);
}

// Open a view with a request already made (a saved run's input, say): as if it had been typed.
async function openWith(id, body) {
  history.replaceState(null, "", `#${id}`);
  await showView(id);
  state.body = clone(body);
  state.scenario = "";
  state.started = null;
  renderForm();
  $("form").scrollIntoView({ block: "start" });
}

// A problem's JSON pointers become the rows, columns and fields the person typed into.
function locate(pointer) {
  const exact = state.places.find((p) => p.pointer === pointer);
  if (exact) return exact;
  let best = null;
  for (const p of state.places) {
    if (pointer.startsWith(p.pointer + "/") && (!best || p.pointer.length > best.pointer.length)) best = p;
  }
  return best;
}

// A pointer to a whole row or object (/households/2/shares) marks every cell under it and is
// named by the row when they share one.
function locateAll(pointer) {
  const under = state.places.filter((p) => p.pointer.startsWith(pointer + "/"));
  if (!under.length) return null;
  const rows = new Set(under.map((p) => p.rowWhere || p.where));
  return { inputs: under.map((p) => p.input), where: rows.size === 1 ? [...rows][0] : null };
}

function showProblem(problem) {
  const lines = [problem.title || "The request was refused."];
  let first = null;
  for (const e of problem.errors || []) {
    const p = locate(e.pointer || "");
    const group = p ? null : locateAll(e.pointer || "");
    if (group && group.where) {
      group.inputs.forEach((i) => i.setAttribute("aria-invalid", "true"));
      first = first || group.inputs[0];
      lines.push(`${group.where}: ${e.detail}`);
    } else if (p) {
      p.input.setAttribute("aria-invalid", "true");
      first = first || p.input;
      lines.push(`${p.where}${fromFile(p.pointer)}: ${e.detail}`);
    } else {
      lines.push(`In the request JSON at ${e.pointer}: ${e.detail}`);
    }
  }
  if (!problem.errors && problem.detail) lines.push(problem.detail);
  $("result").hidden = true;
  showError(lines, first);
}

function showError(lines, focus) {
  const box = $("error");
  box.replaceChildren(...lines.map((l, i) => el(i === 0 && lines.length > 1 ? "strong" : "p", { text: l })));
  box.hidden = lines.length === 0;
  if (lines.length) {
    box.scrollIntoView({ block: "start" });
    if (focus) focus.focus({ preventScroll: true });
  }
}
const showFailure = (e) => { $("status").textContent = ""; showError([String(e.message || e)]); };

const fmt = (x, d = 4) => (x === null || x === undefined ? "" : Number(x).toFixed(d));
const WITHHELD = "not a result";

const cellText = (v, c) => (typeof v === "number" ? fmt(v, c.digits ?? 4)
  : v === null || v === undefined ? (c.model ? WITHHELD : "") : String(v));

// One drawer per kind of result block; each fills its section and may return a function to
// run once the section is on the page (a chart needs its size). A new kind is one more entry.
function tableOf(id, title, cols, rows, flag) {
  const head = el("thead", {}, el("tr", {}, ...cols.map((c) => el("th", { scope: "col", text: c.title }))));
  const body = el("tbody", {}, ...rows.map((r) => el("tr",
    { class: flag && flag(r) ? "flagged" : null }, ...cols.map((c) => el("td", { text: cellText(c.get(r), c) })))));
  return el("div", { class: "scroll", tabindex: "0", role: "region", "aria-label": title },
    el("table", { id }, head, body));
}

// A block may let the reader choose what it shows (a clause, a period, a node, a change
// measure): `choose: {label, options(answer) -> [[value, text]]}`; its chart(answer, choice)
// and table(answer, choice) -> {columns, rows} are drawn again on each choice.
function chooser(section, block, answer, redraw) {
  if (!block.choose) return null;
  const options = block.choose.options(answer);
  const id = `${block.id}-choice`;
  const select = el("select", { id }, ...options.map(([v, t], k) => el("option", { value: String(k), text: t,
    selected: block.choose.initial ? block.choose.initial(answer) === v : k === 0 })));
  select.addEventListener("change", () => redraw(options[Number(select.value)][0]));
  section.append(el("div", { class: "field" }, el("label", { for: id, text: block.choose.label }), select));
  return options.length ? options[Number(select.value)][0] : null;
}

// One drawer per kind of result block; each fills its section and may return a function to
// run once the section is on the page (a chart needs its size). A new kind is one more entry.
const BLOCKS = {
  cards(section, block, answer) {
    section.append(el("div", { class: "cards" }, ...block.cards(answer).map((c) =>
      el("div", { class: "card" }, el("span", { text: c.label }), el("strong", { id: c.id,
        class: c.withheld ? "withheld" : null,
        text: c.withheld ? WITHHELD : typeof c.value === "string" ? c.value : fmt(c.value, c.digits ?? 4) })))));
  },
  chart(section, block, answer, title) {
    const canvas = el("canvas", { role: "img", "aria-label": title });
    const table = el("div", { class: "chosen-table" });
    const note = el("p", { class: "hint" });
    const draw = (choice) => {
      window.dualcostCharts.drawChart(canvas, block.chart(answer, choice));
      note.textContent = block.text ? block.text(answer, choice) : "";
      note.hidden = !note.textContent;
      if (block.table) {
        const t = block.table(answer, choice);
        table.replaceChildren(tableOf(`${block.id}-table`, title, t.columns, t.rows, t.flag));
      }
    };
    const first = chooser(section, block, answer, draw);
    section.append(el("div", { class: "chart", style: `height:${block.height ? block.height(answer) : 320}px` }, canvas), note, table);
    section.dataset.chart = block.id;
    return () => draw(first);
  },
  table(section, block, answer, title) {
    const cols = typeof block.columns === "function" ? block.columns(answer) : block.columns;
    section.append(tableOf(block.id, title, cols, block.rows(answer), block.flag));
  },
  text(section, block, answer) {
    section.append(el("p", { text: block.text(answer) }));
  },
  // A view's own drawing (a list with buttons, a panel that fetches more): it fills the section
  // and may return a function to run once the section is on the page.
  custom(section, block, answer) {
    return block.render(section, answer);
  },
  // A prominent box (the indexation caution): `text(answer)`.
  warning(section, block, answer) {
    section.append(el("p", { class: "caution", role: "note", id: block.id }, el("strong", { text: block.text(answer) })));
  },
  // A tree as a table whose groups fold: `nodes(answer)` in depth-first order, each with `key`,
  // `parent` (a key or null), `depth`, `label`; `columns` read each node.
  tree(section, block, answer, title) {
    const nodes = block.nodes(answer);
    const cols = block.columns;
    const hasChildren = new Set(nodes.map((n) => n.parent).filter((k) => k !== null));
    const rows = new Map();
    const open = new Map(nodes.map((n) => [n.key, n.depth < (block.openDepth ?? 1)]));
    const shown = (n) => n.parent === null || (open.get(n.parent) && shown(nodes.find((m) => m.key === n.parent)));
    const refresh = () => nodes.forEach((n) => { rows.get(n.key).hidden = !shown(n); });
    const body = el("tbody", {}, ...nodes.map((n) => {
      const toggle = hasChildren.has(n.key) ? el("button", { type: "button", class: "fold",
        "aria-expanded": String(open.get(n.key)), "aria-label": `${open.get(n.key) ? "fold" : "unfold"} ${n.label}`,
        text: open.get(n.key) ? "▾" : "▸" }) : el("span", { class: "fold-space" });
      if (toggle.tagName === "BUTTON") {
        toggle.addEventListener("click", () => {
          open.set(n.key, !open.get(n.key));
          toggle.setAttribute("aria-expanded", String(open.get(n.key)));
          toggle.setAttribute("aria-label", `${open.get(n.key) ? "fold" : "unfold"} ${n.label}`);
          toggle.textContent = open.get(n.key) ? "▾" : "▸";
          refresh();
        });
      }
      const tr = el("tr", { "data-node": n.key }, el("th", { scope: "row", class: "tree-label",
        style: `padding-left:${0.3 + 0.9 * n.depth}rem` }, toggle, ` ${n.label}`),
        ...cols.map((c) => el("td", { text: cellText(c.get(n), c) })));
      rows.set(n.key, tr);
      return tr;
    }));
    refresh();
    const head = el("thead", {}, el("tr", {}, el("th", { scope: "col", text: block.nodeTitle || "node" }),
      ...cols.map((c) => el("th", { scope: "col", text: c.title }))));
    section.append(el("div", { class: "scroll", tabindex: "0", role: "region", "aria-label": title },
      el("table", { id: block.id, class: "tree-table" }, head, body)));
  },
};

// A block's section: its title, the notices that change its meaning, then what its kind draws.
function blockSection(block, answer, used) {
  const near = (answer.notices || []).filter((n) => (block.notices || []).includes(n.code));
  near.forEach((n) => used.add(n));
  const title = typeof block.title === "function" ? block.title(answer) : block.title;
  const section = el("section", { class: `block ${block.kind}` }, title ? el("h3", { text: title }) : null,
    ...near.map((n) => el("p", { class: "warning", role: "note", text: `⚠ ${n.message}` })));
  section._draw = BLOCKS[block.kind](section, block, answer, title);
  return section;
}

function renderAnswer(answer) {
  const out = $("result");
  const used = new Set();
  const blocks = [];
  const validity = state.view.validity ? state.view.validity(answer) : null;
  if (validity) blocks.push(el("div", { id: "validity", class: "blocking", role: "alert" },
    el("strong", { text: validity.title }), el("ul", {}, ...validity.reasons.map((r) => el("li", { text: r })))));
  for (const block of state.view.results) {
    if (!block.when || block.when(answer)) blocks.push(blockSection(block, answer, used));
  }
  const rest = (answer.notices || []).filter((n) => !used.has(n));
  if (rest.length) blocks.push(el("section", { class: "block" }, el("h3", { text: "Notices" }),
    el("ul", { class: "notices" }, ...rest.map((n) => el("li", { text: n.message })))));
  if (answer.caution) blocks.push(el("p", { class: "hint", text: answer.caution }));
  const offered = state.view.downloads || ["json", "csv"];
  const downloads = el("div", { class: "row" }, ...offered.map((kind) => el("button", { type: "button",
    id: `download-${kind}`, text: `Download ${kind.toUpperCase()}`, onclick: () => download(kind).catch(showFailure) })));
  const sens = state.view.sensitivity ? sensitivityBlock(state.view.sensitivity) : null;
  out.replaceChildren(...[el("h2", { text: "Result", tabindex: "-1", id: "result-title" }), runLine(), downloads, ...blocks, sens].filter(Boolean));
  out.hidden = false;
  for (const b of blocks) if (b._draw) b._draw();
  $("result-title").focus({ preventScroll: true });
  out.scrollIntoView({ block: "start" });
}

// JSON as answered; CSV as the service writes it (the same request with Accept: text/csv).
async function download(kind) {
  let blob;
  if (kind === "json") {
    blob = new Blob([JSON.stringify(state.answer, null, 1)], { type: "application/json" });
  } else {
    // A view whose CSV is elsewhere (a job's results) names it: view.csvUrl(answer).
    const response = state.view.csvUrl ? await fetch(state.view.csvUrl(state.answer), { headers: headers("text/csv") })
      : await fetch(state.view.path, { method: "POST", headers: headers("text/csv", true), body: JSON.stringify(state.sent) });
    if (!response.ok) throw new Error(`The CSV answer was refused (${response.status}).`);
    blob = new Blob([await response.text()], { type: "text/csv" });
  }
  const a = el("a", { href: URL.createObjectURL(blob), download: `${state.view.id}.${kind}` });
  document.body.append(a);
  a.click();
  a.remove();
}

// ---- CSV upload: read in the page into the view's grids, errors by file row and column ---------
function splitCsv(text) {
  const lines = text.split(/\r?\n/).filter((l) => l.trim().length);
  const sep = lines[0] && lines[0].includes(";") && !lines[0].includes(",") ? ";" : ",";
  return lines.map((l) => l.split(sep).map((c) => c.trim().replace(/^"(.*)"$/, "$1")));
}

// A file the page cannot read as text (a Parquet file) is read by the service (POST /v1/tables)
// into the same header and rows, each row named by its place in the file as the service names it.
async function readsAsText(file) {
  if (/\.parquet$/i.test(file.name)) return false;
  const head = new Uint8Array(await file.slice(0, 4096).arrayBuffer());
  return !(String.fromCharCode(...head.slice(0, 4)) === "PAR1" || head.includes(0));
}

// "#row=3&column=price", "#column=price", "#cell=3,2", "#row=3" as the person reads them.
function filePlace(pointer) {
  const p = new URLSearchParams(String(pointer || "").replace(/^#/, ""));
  const cell = p.has("cell") ? p.get("cell").split(",") : [];
  return [cell[0] || p.get("row"), cell[1] || p.get("column")].map((v, k) => (!v ? null
    : k === 0 ? `row ${v}` : /^\d+$/.test(v) ? `column ${v}` : `column '${v}'`)).filter(Boolean).join(", ");
}

async function readByService(file) {
  const r = await fetch("/v1/tables", { method: "POST", body: file,
    headers: { ...headers("application/json"), "content-type": "application/vnd.apache.parquet" } });
  const a = await r.json();
  if (!r.ok) {
    const errors = a.errors && a.errors.length ? a.errors : [{ pointer: "", detail: a.detail }];
    throw new Located(errors.map((e) => `${[file.name, filePlace(e.pointer)].filter(Boolean).join(", ")}: ${e.detail}`).join(" "));
  }
  return { rows: [a.columns, ...a.rows.map((cells) => cells.map((c) => (c === null ? "" : String(c))))],
    rowAt: (i) => a.row_numbers[i] };
}

async function uploadCsv(input) {
  const file = input.files[0];
  if (!file) return;
  const { rows, rowAt } = (await readsAsText(file)) ? { rows: splitCsv(await file.text()), rowAt: (i) => i + 2 }
    : await readByService(file);
  if (rows.length < 2) throw new Located(`${file.name}: give a header row and at least one row.`);
  const header = rows[0];
  const records = rows.slice(1).map((cells, i) => {
    if (cells.length !== header.length) {
      const comma = cells.length > header.length && cells.some((c) => /^\d+$/.test(c));
      throw new Located(`${file.name}, row ${rowAt(i)}: ${cells.length} cells, but the header has ${header.length}`
        + (comma ? ". A decimal comma splits a number in two: write 2.52, not 2,52 (or separate the cells with ';')." : "."));
    }
    return Object.fromEntries(header.map((h, c) => [h, { text: cells[c], where: `${file.name}, row ${rowAt(i)}, column '${h}'` }]));
  });
  const need = state.view.csv.required || [];
  for (const col of need) {
    if (!header.includes(col)) throw new Located(`${file.name}, row 1: the header has no column '${col}'.`);
  }
  // number(cell, pointer): the cell's number; with the pointer it will have in the request, the
  // service's errors about it also name the file's row and column.
  const origin = new Map();
  const num = (cell, pointer) => {
    const value = readNumber(cell.text, cell.where);
    if (pointer) origin.set(pointer, cell.where);
    return value;
  };
  state.body = state.view.csv.read(records, clone(state.body), num);
  state.origin = origin;
  state.scenario = "";
  renderForm();
  showError([]);
  $("form").scrollIntoView({ block: "start" });
}

// ---- sensitivity: the Konüs index and each bias as σ (or the family) changes ------------------
// Computed by the service: today by one comparison per point (SWEEP.byComparisons); a sweep
// operation can take its place by providing the same function (body, points) -> rows.
const SWEEP = {
  // One request to POST /v1/sensitivity with every point as a model of its set: the answer's
  // models come back in the order sent, each a comparison's figures.
  async bySweep(path, body, points) {
    const keep = ["items", "base", "current", "formulas", "normalise_shares", "share_unit"];
    const request = Object.fromEntries(keep.filter((k) => body[k] !== undefined).map((k) => [k, body[k]]));
    request.models = points.map((pt) => pt.model);
    const r = await fetch("/v1/sensitivity", { method: "POST", headers: headers("application/json", true),
      body: JSON.stringify(request) });
    const a = await r.json();
    if (!r.ok) return points.map((pt) => ({ label: pt.label, x: pt.x, ok: false, answer: a }));
    return points.map((pt, k) => ({ label: pt.label, x: pt.x, ok: true, answer: asComparison(a.models[k]) }));
  },
  async byComparisons(path, body, points) {
    const rows = [];
    for (const pt of points) {
      const b = clone(body);
      b.model = pt.model;
      const r = await fetch(path, { method: "POST", headers: headers("application/json", true),
        body: JSON.stringify(b) });
      const a = await r.json();
      rows.push({ label: pt.label, x: pt.x, ok: r.ok, answer: a });
    }
    return rows;
  },
};

// A point of a sweep read as a comparison's answer (the figures the sensitivity control shows).
function asComparison(point) {
  const lasp = point.formulas.find((f) => f.formula === "laspeyres");
  return { ...point, laspeyres_gap_points: lasp ? lasp.bias_points : null };
}

function sensitivityBlock(spec) {
  const kind = el("select", { id: "sweep-kind" },
    el("option", { value: "sigma", text: "σ (0.1 to 2.5; a tree's σ all scaled)" }),
    el("option", { value: "family", text: "the preference family (simple families)" }));
  const canvas = el("canvas", { role: "img", "aria-label": "Konüs index and biases by σ or family" });
  const table = el("div", { id: "sweep-table" });
  const run = async () => {
    const points = spec.points(state.sent, kind.value);
    if (!points.length) { table.replaceChildren(el("p", { text: "This family has no single σ to vary; compare families instead." })); return; }
    $("status").textContent = "Computing the sensitivity…";
    const rows = await SWEEP[spec.source || "byComparisons"](state.view.path, state.sent, points);
    $("status").textContent = "";
    window.dualcostCharts.drawChart(canvas, spec.chart(rows, kind.value));
    table.replaceChildren(spec.table(rows));
    canvas.closest("section").scrollIntoView({ block: "start" });
  };
  return el("section", { class: "block sensitivity", id: "sensitivity" }, el("h3", { text: "Sensitivity: how the Konüs index and each bias move" }),
    el("div", { class: "row" }, el("div", { class: "field" }, el("label", { for: "sweep-kind", text: "Vary" }), kind),
      el("button", { type: "button", id: "sweep", text: "Show the sensitivity", onclick: () => run().catch(showFailure) })),
    el("div", { class: "chart", style: "height:320px" }, canvas), table);
}

// ---- navigation --------------------------------------------------------------------------------
async function showView(id) {
  const view = state.views.find((v) => v.id === id) || state.views[0];
  state.view = view;
  state.answer = null;
  for (const b of document.querySelectorAll("nav button")) b.setAttribute("aria-current", b.dataset.view === view.id ? "page" : "false");
  $("view-title").textContent = view.title;
  $("view-intro").textContent = view.intro;
  $("result").hidden = true;
  showError([]);
  const first = scenarios(view)[0];
  if (first) await loadScenario(first.id);
  else { state.body = {}; renderForm(); }
  // A view that only reads (a listing) answers as soon as it is opened.
  if (view.computeOnOpen) await compute();
}

async function boot(views) {
  state.views = views;
  // Enter in any field, or the button, computes (the page's policy allows no inline handlers).
  $("form").addEventListener("submit", (event) => {
    event.preventDefault();
    compute().catch(showFailure);
  });
  const key = $("api-key");
  key.value = sessionStorage.getItem("dualcost-api-key") || "";
  key.addEventListener("change", () => {
    if (key.value.trim()) sessionStorage.setItem("dualcost-api-key", key.value.trim());
    else sessionStorage.removeItem("dualcost-api-key");
    location.reload();
  });
  state.catalogue = await loadCatalogue();
  const nav = $("views");
  for (const v of views) {
    nav.append(el("button", { type: "button", "data-view": v.id, text: v.title,
      onclick: () => { history.replaceState(null, "", `#${v.id}`); showView(v.id).catch(showFailure); } }));
  }
  window.addEventListener("hashchange", () => {
    const id = location.hash.slice(1);
    if (id !== state.view.id && state.views.some((v) => v.id === id)) showView(id).catch(showFailure);
  });
  await showView(location.hash.slice(1) || views[0].id);
}

// A plain line under the form about something the page did (not an error).
const say = (text) => { $("status").textContent = text; };

window.dualcost = { boot, fmt, el, getAt, WITHHELD, state, say, headers, showError, showProblem, showView, openWith, Located, asComparison };
