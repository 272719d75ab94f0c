// More views, declared as in views.js and appended to window.dualcostViews (this file is loaded
// after views.js, before the catalogue arrives, so the menu lists them): saved runs, household
// jobs for large files, fitted sensitivity across families, and uprating on a tree's node.
"use strict";

(() => {
  const C = window.dualcostCharts;
  const W = window.dualcost;
  const { el, fmt } = W;
  const esc = (s) => String(s).replaceAll("~", "~0").replaceAll("/", "~1");
  const itemId = (x) => (typeof x === "object" ? x.id : x);
  const scroll = (label, ...children) => el("div", { class: "scroll", tabindex: "0", role: "region", "aria-label": label }, ...children);
  const table = (id, heads, rows, flag) => el("table", { id },
    el("thead", {}, el("tr", {}, ...heads.map((h) => el("th", { scope: "col", text: h })))),
    el("tbody", {}, ...rows.map((r, k) => el("tr", { class: flag && flag(k) ? "flagged" : null },
      ...r.map((c) => el("td", { text: typeof c === "number" ? fmt(c, 4) : c === null || c === undefined ? "" : String(c) }))))));
  const json = (x) => el("pre", { class: "json", tabindex: "0", text: JSON.stringify(x, null, 1) });
  // A query's problem (#/query/since) named by the field the person typed it in (/since).
  const fromQuery = (p) => ({ ...p, errors: (p.errors || []).map((e) => ({ ...e, pointer: (e.pointer || "").replace(/^#\/query\//, "/") })) });

  async function getJson(url) {
    const r = await fetch(url, { headers: W.headers("application/json") });
    return { ok: r.ok, answer: await r.json() };
  }

  // ---- Saved runs (GET /v1/runs, GET /v1/runs/{id}, POST /v1/runs/{id}/rerun) -----------------
  function rerunBlock(box, rerun) {
    const d = rerun.differences;
    const cards = el("div", { class: "cards" }, ...[
      ["rerun-identical", "identical to the saved answer", rerun.identical ? "yes" : "NO"],
      ["rerun-compared", "figures compared", String(rerun.figures_compared)],
      ["rerun-differing", "figures differing", String(rerun.figures_differing)],
      ["rerun-largest", "largest difference", rerun.largest_difference === null ? "none" : fmt(rerun.largest_difference, 6)],
      ["rerun-versions", "saved version → this version", `${rerun.saved.version} → ${rerun.current.version}`],
    ].map(([id, label, text]) => el("div", { class: "card" }, el("span", { text: label }), el("strong", { id, text }))));
    box.append(el("h3", { text: "Re-run on this version: the differences figure by figure" }), cards);
    if (rerun.current.problem) box.append(el("p", { class: "warning", text: `This version refuses the saved input: ${rerun.current.problem.title || ""} ${rerun.current.problem.detail || ""}` }));
    if (!d.length) {
      box.append(el("p", { class: "saved", text: `Reproduced: all ${rerun.figures_compared} figures of the saved answer are the same on this version.` }));
      return;
    }
    box.append(scroll("differences", table("rerun-table", ["where (JSON pointer)", "saved", "now", "now − saved", "relative"],
      d.map((x) => [x.where, x.saved, x.current, x.difference, x.relative]), () => true)));
    if (d.length > rerun.differences_listed_at_most - 1) box.append(el("p", { class: "hint", text: `The first ${d.length} differences are listed.` }));
  }

  async function openRun(box, id) {
    W.say(`Opening run ${id}…`);
    const { ok, answer: run } = await getJson(`/v1/runs/${encodeURIComponent(id)}`);
    W.say("");
    if (!ok) { W.showError([run.title || "Not found", run.detail || ""]); return; }
    const view = W.state.views.find((v) => v.operationId === run.operation && v.path === run.request.path);
    const out = el("div", {});
    const rerun = el("button", { type: "button", id: "rerun", class: "primary", text: "Re-run on this version", onclick: async () => {
      W.say("Re-running…");
      const r = await fetch(run.links.rerun, { method: "POST", headers: W.headers("application/json") });
      const a = await r.json();
      W.say("");
      out.replaceChildren();
      if (!r.ok) { W.showError([a.title || "Refused", a.detail || ""]); return; }
      rerunBlock(out, a);
      out.scrollIntoView({ block: "start" });
    } });
    box.replaceChildren(el("h3", { id: "run-title", tabindex: "-1", text: `Run ${run.id}` }),
      scroll("the run", table("run-facts", ["operation", "saved (UTC)", "version", "request", "status", "input digest"],
        [[run.operation, run.created, run.version, `${run.request.method} ${run.request.path}${run.request.query ? "?" + run.request.query : ""}`, run.status, run.input_digest]])),
      el("div", { class: "row" }, rerun,
        view && run.request.content_type === "application/json" ? el("button", { type: "button", id: "run-edit", text: `Open its input in ${view.title}`,
          onclick: () => W.openWith(view.id, run.input).catch((e) => W.showError([String(e)])) }) : null,
        el("a", { href: run.links.self, text: "the run as JSON" })),
      el("details", { open: true }, el("summary", { text: "Its input (canonical)" }), json(run.input)),
      el("details", {}, el("summary", { text: `Its answer (${run.answer_type}), as saved` }), json(run.answer)), out);
    box.hidden = false;
    box.querySelector("#run-title").focus({ preventScroll: true });
    box.scrollIntoView({ block: "start" });
  }

  function runList(section, page) {
    const detail = el("section", { class: "block run-detail", id: "run-detail", hidden: true });
    const rows = page.runs.map((r) => el("tr", { "data-run": r.id },
      el("td", {}, el("button", { type: "button", text: "Open", "aria-label": `open run ${r.id}`, onclick: () => openRun(detail, r.id).catch((e) => W.showError([String(e)])) })),
      el("td", { text: r.operation }), el("td", { text: r.created.replace("T", " ").replace(/\.\d+Z$/, "Z") }),
      el("td", { text: r.version }), el("td", { text: r.id.slice(0, 12) + "…" })));
    section.append(page.runs.length ? scroll("saved runs", el("table", { id: "runs-table" },
      el("thead", {}, el("tr", {}, ...["", "operation", "saved (UTC)", "version", "run"].map((h) => el("th", { scope: "col", text: h })))),
      el("tbody", {}, ...rows))) : el("p", { text: "No saved runs match. Tick 'Keep this run' under any view's Compute button to keep one." }));
    if (page.next) {
      section.append(el("button", { type: "button", id: "runs-older", text: "Older runs", onclick: async () => {
        const { ok, answer } = await getJson(page.next);
        if (!ok) { W.showProblem(fromQuery(answer)); return; }
        const more = el("div", {});
        runList(more, answer);
        section.querySelector("#runs-older").replaceWith(...more.childNodes);
      } }));
    }
    section.append(detail);
    return () => {
      const id = W.state.pendingRun;
      W.state.pendingRun = null;
      if (id) openRun(detail, id).catch((e) => W.showError([String(e)]));
    };
  }

  const runs = {
    id: "runs",
    title: "Saved runs",
    intro: "The runs kept with 'Keep this run' (save=true), newest first: open one to see its input, "
      + "answer, version and time, and re-run it on this version to check that every figure is reproduced.",
    path: "/v1/runs",
    saves: false,
    action: "List runs",
    computeOnOpen: true,
    downloads: ["json"],
    start: { title: "All my runs", body: () => ({}) },
    fields: [
      { pointer: "/operation", label: "Operation", kind: "select", optional: true, empty: "(all operations)",
        options: (cat) => Object.keys(cat.examples).sort().map((o) => [o, o]) },
      { pointer: "/since", label: "Saved since (ISO 8601, UTC)", kind: "text", optional: true, hint: "e.g. 2026-12-02 or 2026-12-02T13:00:00Z" },
      { pointer: "/until", label: "Saved before", kind: "text", optional: true },
      { pointer: "/limit", label: "Runs per page", kind: "number", optional: true, hint: "1 to 500; 50 if empty" },
    ],
    async submit(body) {
      const q = new URLSearchParams(Object.entries(body).filter(([, v]) => v !== undefined && v !== "").map(([k, v]) => [k, String(v)]));
      const { ok, answer } = await getJson(`/v1/runs${q.toString() ? "?" + q : ""}`);
      return { ok, answer: ok ? answer : fromQuery(answer) };
    },
    results: [
      { kind: "cards", cards: (a) => [{ id: "runs-count", label: a.next ? "runs on this page (more: Older runs)" : "runs", value: a.runs.length, digits: 0 }] },
      { kind: "custom", title: "Runs, newest first", render: runList },
    ],
  };

  // ---- Household jobs for large files (POST /v1/household-jobs, then the CSV) -------------------
  let sampleHouseholds = "";
  const jobCsv = (households, items) => [["household", "expenditure", "weight", ...items].join(","),
    ...households.map((h) => [h.id, h.expenditure, h.weight, ...items.map((i) => h.shares[i])].join(","))].join("\n");
  const recordOf = (pointer) => {
    const m = /#cell=(\d+),(\d+)/.exec(pointer || "") || /#row=(\d+)/.exec(pointer || "");
    return m ? { record: Number(m[1]), column: m[2] ? Number(m[2]) : null } : { record: null, column: null };
  };

  function progressBox() {
    let box = document.getElementById("job-progress");
    if (!box) {
      box = el("div", { id: "job-progress", role: "status" }, el("progress", { max: 1, "aria-label": "job progress" }), el("p", {}));
      document.getElementById("status").after(box);
    }
    return box;
  }

  function showProgress(job) {
    const box = progressBox();
    const p = job.progress;
    const bar = box.querySelector("progress");
    if (p.fraction === null) bar.removeAttribute("value");
    else bar.value = p.fraction;
    box.querySelector("p").textContent = `Job ${job.id}: ${job.status.replaceAll("_", " ")}; rows read ${p.rows_read}`
      + `${p.rows_total ? ` of ${p.rows_total}` : ""}, households done ${p.households_done}, skipped ${p.rows_skipped}`
      + `${p.fraction === null ? "" : ` (${Math.round(100 * p.fraction)}%)`}.`;
  }

  async function runJob(body) {
    const input = document.getElementById("households-file");
    const file = input && input.files[0];
    const name = file ? file.name : "the example's households";
    const text = file ? await file.text() : sampleHouseholds;
    const made = await fetch("/v1/household-jobs", { method: "POST", headers: W.headers("application/json", true), body: JSON.stringify(body) });
    const job = await made.json();
    if (!made.ok) return { ok: false, answer: job };
    showProgress(job);
    let done = false;
    const poll = (async () => {
      while (!done) {
        await new Promise((r) => setTimeout(r, 250));
        const { ok, answer } = await getJson(job.links.self);
        if (ok && !done) showProgress(answer);
      }
    })();
    const sent = await fetch(job.links.households, { method: "POST", headers: { ...W.headers("text/csv"), "content-type": "text/csv" }, body: text });
    const answerText = await sent.text();
    done = true;
    await poll;
    if (!sent.ok) {
      const problem = JSON.parse(answerText);
      const lines = (problem.errors || [{ pointer: "", detail: problem.detail }]).map((e) => {
        const at = recordOf(e.pointer);
        return `${name}${at.record ? `, line ${at.record}` : ""}${at.column ? `, column ${at.column}` : ""}: ${e.detail}`;
      });
      throw new W.Located([problem.title, ...lines].join(" "));
    }
    const { answer: finished } = await getJson(job.links.self);
    showProgress(finished);
    return { ok: true, answer: { ...finished, households_file: name } };
  }

  const konusOf = (s) => s.indices.find((i) => i.index === "konus") || {};
  const jobs = {
    id: "household-jobs",
    title: "Households from a large file",
    intro: "A household job for files too large for one request: the prices and model first, then the "
      + "households as CSV; progress while it runs, then the distribution summaries, the rows skipped and why, and the results as CSV.",
    path: "/v1/household-jobs",
    saves: false,
    action: "Run the job",
    start: { title: "Example: Wrenmouth deciles, CES (households as a CSV)", body(cat) {
      const ex = JSON.parse(JSON.stringify(Object.values(cat.examples.householdIndices || {})[0].value));
      sampleHouseholds = jobCsv(ex.households, ex.items.map(itemId));
      delete ex.households;
      delete ex.band_models;
      return ex;
    } },
    note: "No file chosen: the example's ten deciles are sent as a CSV. Rows that break a rule are skipped and listed (bad rows: reject refuses the file instead).",
    fields: [
      { kind: "model", pointer: "/model", label: "Preference model", families: ["cobb_douglas", "ces", "stone_geary", "translog", "quadratic"] },
      { kind: "formulas", pointer: "/formulas", label: "Formulas", scope: "households" },
      { pointer: "/bad_rows", label: "Bad rows", kind: "select", optional: true, empty: "(service default: skip)", options: [["skip", "skip and list them"], ["reject", "refuse the file"]] },
    ],
    grids: [{ title: "Prices", rows: { pointer: "/items", title: "item" }, columns: [
      { title: "base price", pointer: "/base_prices/{row}" }, { title: "current price", pointer: "/current_prices/{row}" }] }],
    extras: (body) => [el("div", { class: "field" },
      el("label", { for: "households-file", text: `Households CSV: household, expenditure, weight and one column per item id (${(body.items || []).map(itemId).join(", ")}) holding its base share` }),
      el("input", { type: "file", id: "households-file", accept: ".csv,text/csv" }))],
    submit: runJob,
    csvUrl: (a) => a.links.results,
    results: [
      { kind: "cards", cards: (a) => [
        { id: "job-households", label: "households done", value: a.progress.households_done, digits: 0 },
        { id: "job-skipped", label: "rows skipped", value: a.skipped.count, digits: 0 },
        { id: "job-konus-democratic", label: "Konüs index, democratic", value: konusOf(a.summary[0]).democratic },
        { id: "job-konus-plutocratic", label: "Konüs index, plutocratic", value: konusOf(a.summary[0]).plutocratic },
        { id: "job-cv-percent", label: "compensating variation, % of income", value: a.summary[0].cv_percent_of_income, digits: 2 }] },
      { kind: "chart", id: "job-chart", title: (a) => `Household indices: aggregates and the spread (${a.summary[0].period})`,
        height: (a) => 110 + a.summary[0].indices.length * 48,
        chart: (a) => {
          const s = a.summary[0].indices;
          const q = (i, p) => ((i.quantiles.find((x) => x.probability === p) || {}).value);
          const low = (i) => q(i, 0.1) ?? i.minimum;
          const high = (i) => q(i, 0.9) ?? i.maximum;
          const config = C.barConfig({ labels: s.map((i) => i.index), xTitle: "index", yTitle: "index, base = 100 (100 = no change)",
            datasets: [
              { label: "democratic (each household alike)", data: s.map((i) => [100, 100 * i.democratic]), barPercentage: 0.45 },
              { label: "plutocratic (by expenditure)", data: s.map((i) => (i.plutocratic === null ? null : [100, 100 * i.plutocratic])), barPercentage: 0.45 },
              { label: "10th to 90th percentile of households", data: s.map((i) => [100 * low(i), 100 * high(i)]), backgroundColor: "rgba(0,0,0,0.12)",
                borderColor: "rgba(0,0,0,0.4)", borderWidth: 1, grouped: false, barPercentage: 1, categoryPercentage: 1, order: 10 }],
            zeroAt: 100 });
          config.options.scales.x.beginAtZero = false;
          return config;
        } },
      { kind: "table", id: "job-summary", title: "Summaries by index", rows: (a) => a.summary.flatMap((s) => s.indices.map((i) => ({ ...i, period: s.period }))),
        columns: [{ title: "period", get: (i) => i.period }, { title: "index", get: (i) => i.index },
          { title: "households", get: (i) => i.households, digits: 0 }, { title: "democratic", get: (i) => i.democratic },
          { title: "plutocratic", get: (i) => i.plutocratic }, { title: "share above democratic", get: (i) => i.share_above_democratic, digits: 3 },
          ...[0, 1, 2].map((k) => ({ title: `quantile ${k + 1}`, get: (i) => (i.quantiles[k] ? `${i.quantiles[k].probability}: ${fmt(i.quantiles[k].value)}` : "") }))] },
      { kind: "table", id: "job-skipped-rows", when: (a) => a.skipped.count > 0, title: (a) => `Rows skipped (${a.skipped.count}; the first 100 listed), from ${a.households_file}`,
        rows: (a) => a.skipped.rows, flag: () => true, columns: [
          { title: "row", get: (r) => r.row, digits: 0 }, { title: "file line", get: (r) => recordOf(r.pointer).record, digits: 0 },
          { title: "column", get: (r) => recordOf(r.pointer).column, digits: 0 }, { title: "reason", get: (r) => r.reason },
          { title: "detail", get: (r) => r.detail }] },
    ],
  };


  // The fitted families and the uprating on a tree's node have their views in views.js.
  window.dualcostViews.push(runs, jobs);
})();
