// The views, declared as data: an operation path, where its examples come from, its form fields
// and grids (each a JSON pointer into the request), how a CSV upload fills them, and the charts,
// tables and cards of its answer. workspace.js does the rest. DEVELOPERS.md says how to add one.
"use strict";

(() => {
  const C = window.dualcostCharts;
  const { fmt } = window.dualcost;
  const itemId = (x) => (typeof x === "object" ? x.id : x);
  const esc = (s) => String(s).replaceAll("~", "~0").replaceAll("/", "~1");
  const titleOf = (a, f) => (a.formulas.find((x) => x.formula === f) || {}).title || f;
  const num = (x) => (x === null || x === undefined ? null : x);
  // The weighted formulas of an answer (the registry says which), or all if none is weighted.
  const weighted = (a) => {
    const flags = Object.fromEntries(window.dualcost.state.catalogue.formulas.map((f) => [f.formula, f.weighted]));
    const w = a.formulas.filter((f) => flags[f.formula] !== false);
    return w.length ? w : a.formulas;
  };

  // What the model cannot stand behind is not a result: a blocking box above the figures.
  const validityBox = (a) => (a.validity && a.validity.regular === false ? {
    title: "The model is outside its regular region here: its Konüs index, compensation and "
      + "biases are not results. Do not use them.",
    reasons: [...a.validity.reasons.map((r) => r.message), a.validity.usable].filter(Boolean),
  } : null);

  // Long-form panels (the columns of POST /v1/index-series/csv): period,item,price[,quantity].
  function readPanel(records, body, n) {
    const periods = [];
    const items = [];
    const prices = [];
    const quantities = [];
    for (const r of records) {
      const p = r.period.text;
      const i = r.item.text;
      if (!periods.includes(p)) { periods.push(p); prices.push({}); quantities.push({}); }
      if (!items.some((x) => itemId(x) === i)) items.push(r.label && r.label.text ? { id: i, label: r.label.text } : i);
      const t = periods.indexOf(p);
      prices[t][i] = n(r.price, `/prices/${t}/${esc(i)}`);
      if (r.quantity && r.quantity.text !== "") quantities[t][i] = n(r.quantity, `/quantities/${t}/${esc(i)}`);
    }
    Object.assign(body, { periods, items, prices });
    if (quantities.some((q) => Object.keys(q).length)) body.quantities = quantities;
    else delete body.quantities;
    if (!periods.includes(body.base_period)) delete body.base_period;
    return body;
  }

  const panelGrids = [
    { title: "Prices by period", rows: { pointer: "/periods", title: "period" },
      columnsFrom: { pointer: "/items", cell: "/prices/{r}/{col}" },
      hint: "An empty cell: the item is not priced in that period." },
    { title: "Quantities by period", rows: { pointer: "/periods", title: "period" },
      columnsFrom: { pointer: "/items", cell: "/quantities/{r}/{col}" } },
  ];

  const modelField = (families) => ({ kind: "model", pointer: "/model", label: "Preference model", families });

  const comparison = {
    id: "comparison",
    title: "Comparison",
    intro: "Two price situations: the Konüs (true) cost-of-living index beside the formula "
      + "indices, how much each formula over- or understates it, compensation, and which items drive the gap.",
    path: "/v1/comparisons",
    operationId: "compare",
    demo: "/v1/demo",
    note: "'Wrenmouth demo' is exactly the request of GET /v1/demo (nested CES, reference income "
      + "700), so its figures are the demo's. The other starts are the service's own examples.",
    csv: { columns: "item,base_price,current_price,base_quantity or base_share[,current_quantity]",
      required: ["item", "base_price", "current_price"],
      read(records, body, n) {
        const keyed = (col, at) => Object.fromEntries(records.filter((r) => r[col] && r[col].text !== "")
          .map((r) => [r.item.text, n(r[col], `${at}/${esc(r.item.text)}`)]));
        body.items = records.map((r) => (r.label ? { id: r.item.text, label: r.label.text } : r.item.text));
        const income = body.base && body.base.expenditure;
        body.base = { prices: keyed("base_price", "/base/prices") };
        if (records[0].base_share) {
          body.base.shares = keyed("base_share", "/base/shares");
          body.base.expenditure = income || 1000;
        } else body.base.quantities = keyed("base_quantity", "/base/quantities");
        body.current = { prices: keyed("current_price", "/current/prices") };
        if (records[0].current_quantity) body.current.quantities = keyed("current_quantity", "/current/quantities");
        const ids = records.map((r) => r.item.text);
        const tree = body.model && body.model.tree;
        const leaves = (g) => (typeof g === "string" ? [g] : (g.children || []).flatMap(leaves));
        if (!body.model || (tree && leaves(tree).sort().join() !== ids.slice().sort().join())) {
          body.model = { family: "ces", sigma: 0.7 };
          window.dualcost.say("The file's items are not the tree's: the model is now CES with σ 0.7. "
            + "Choose the family and its parameters (or build the tree) above.");
        }
        return body;
      } },
    fields: [
      modelField(),
      { kind: "formulas", pointer: "/formulas", label: "Formulas", scope: "comparison" },
      { pointer: "/base/expenditure", label: "Base income m0 (with shares)", kind: "number", optional: true },
      { pointer: "/current/expenditure", label: "Current income m1", kind: "number", optional: true,
        hint: "Empty: base income, or the cost of observed current quantities." },
      { pointer: "/reference_income", label: "Reference income (at base prices)", kind: "number", optional: true },
      { pointer: "/lloyd_moulton_sigma", label: "σ for Lloyd-Moulton", kind: "number", optional: true },
    ],
    grids: [{ title: "Items", rows: { pointer: "/items", title: "item" }, columns: [
      { title: "base price", pointer: "/base/prices/{row}" },
      { title: "current price", pointer: "/current/prices/{row}" },
      { title: "base quantity", pointer: "/base/quantities/{row}" },
      { title: "base share", pointer: "/base/shares/{row}" },
      { title: "current quantity (observed)", pointer: "/current/quantities/{row}" }] }],
    validity: validityBox,
    results: [
      { kind: "cards", cards: (a) => {
        const withheld = !a.validity.regular;
        const lasp = a.formulas.find((f) => f.formula === "laspeyres");
        return [
          { id: "konus-base", label: "Konüs index, base living standard", value: a.konus.base, withheld },
          { id: "konus-current", label: "Konüs index, current living standard", value: a.konus.current, withheld },
          { id: "laspeyres", label: "Laspeyres", value: lasp ? lasp.value : null },
          { id: "bias", label: "Laspeyres bias, index points", value: a.laspeyres_gap_points, digits: 3, withheld },
          { id: "cv", label: "Compensating variation (a loss if positive)", value: a.compensation.compensating_variation, digits: 2, withheld },
          { id: "ev", label: "Equivalent variation (a loss if positive)", value: a.compensation.equivalent_variation, digits: 2, withheld },
        ];
      } },
      { kind: "chart", id: "bias-chart", title: "How much each formula overstates the Konüs index",
        notices: ["current_quantities_from_model", "quantities_from_model", "current_income_assumed"],
        when: (a) => a.validity.regular,
        text: (a) => (weighted(a).length < a.formulas.length
          ? "Unweighted formulas (Carli, Jevons, Dutot) are in the table below: their gaps, of another order, would flatten this chart." : ""),
        height: (a) => 90 + weighted(a).length * 42,
        chart: (a) => C.barConfig({ labels: weighted(a).map((f) => [f.title, `vs Konüs ${f.compared_with}`]),
          datasets: [{ label: "bias, index points (base 100)", data: weighted(a).map((f) => num(f.bias_points)) },
            { label: "bias, percent of the Konüs index", data: weighted(a).map((f) => num(f.bias_percent)) }],
          xTitle: "formula", yTitle: "bias: index points and percent (0 = no bias)" }) },
      { kind: "table", id: "formula-table", title: "Formula indices and the Konüs index each is compared with",
        rows: (a) => a.formulas, columns: [
          { title: "formula", get: (f) => f.title }, { title: "index", get: (f) => f.value },
          { title: "compared with", get: (f) => f.compared_with },
          { title: "Konüs", get: (f) => f.konus, model: true },
          { title: "bias (points)", get: (f) => f.bias_points, digits: 3, model: true },
          { title: "bias (%)", get: (f) => f.bias_percent, digits: 3, model: true }] },
      { kind: "chart", id: "item-chart", title: "Which items drive the Laspeyres gap (index points)",
        when: (a) => a.validity.regular, height: (a) => 60 + a.by_item.length * 24,
        chart: (a) => {
          const items = a.by_item.slice().sort((x, y) => y.laspeyres_gap_points - x.laspeyres_gap_points);
          return C.barConfig({ labels: items.map((i) => i.label || i.item),
            datasets: [{ label: "contribution to the Laspeyres gap, index points", data: items.map((i) => i.laspeyres_gap_points) }],
            xTitle: "item", yTitle: "index points (base 100)" });
        } },
      { kind: "table", id: "item-table", title: "Items: prices, quantities and the substitution split",
        rows: (a) => a.by_item, columns: [
          { title: "item", get: (i) => i.label || i.item }, { title: "price relative", get: (i) => i.price_relative },
          { title: "base qty", get: (i) => i.base_quantity, digits: 3 },
          { title: "current qty", get: (i) => i.current_quantity, digits: 3, model: true },
          { title: "compensated qty", get: (i) => i.compensated_quantity, digits: 3, model: true },
          { title: "substitution", get: (i) => i.substitution_effect, digits: 3, model: true },
          { title: "income", get: (i) => i.income_effect, digits: 3, model: true },
          { title: "gap (points)", get: (i) => i.laspeyres_gap_points, digits: 3, model: true }] },
    ],
    sensitivity: {
      points(body, kind) {
        if (kind === "family") {
          const sigma = typeof body.model.sigma === "number" ? body.model.sigma : 0.7;
          return [["cobb_douglas", {}], ["ces", { sigma }], ["translog", { sigma }], ["quadratic", { sigma }],
            ["stone_geary", { frisch: -2 }]].map(([family, p], x) => ({ label: family, x, model: { family, ...p } }));
        }
        if (typeof body.model.sigma === "number") {
          return [0.1, 0.3, 0.5, 0.7, 0.9, 1.2, 1.5, 2.0, 2.5].map((s) => ({ label: String(s), x: s, model: { ...body.model, sigma: s } }));
        }
        if (body.model.family === "nested_ces") {
          // Every σ of the tree scaled by one factor: the tree's shape kept, its substitution varied.
          const scale = (g, k) => (typeof g === "string" ? g : { ...g, sigma: g.sigma * k, children: g.children.map((c) => scale(c, k)) });
          return [0.25, 0.5, 0.75, 1, 1.5, 2].map((k) => ({ label: `×${k}`, x: k, model: { ...body.model, tree: scale(body.model.tree, k) } }));
        }
        return [];
      },
      chart(rows, kind) {
        const ok = rows.filter((r) => r.ok);
        const formulas = ok.length ? ok[0].answer.formulas.map((f) => f.formula) : [];
        const series = ["laspeyres", "paasche", "fisher", "tornqvist", "lowe", "young"].filter((f) => formulas.includes(f));
        const labels = rows.map((r) => r.label);
        const bias = (r, f) => (r.ok ? num((r.answer.formulas.find((x) => x.formula === f) || {}).bias_points) : null);
        const config = C.lineConfig({ labels, xTitle: kind === "family" ? "preference family" : "σ (or the tree's σ scaled)",
          yTitle: "bias, index points (0 = no bias)", zeroAt: 0,
          datasets: [{ label: "Konüs index, base = 100 (right axis)", yAxisID: "y2", colour: "#000", borderWidth: 3,
            data: rows.map((r) => (r.ok && r.answer.konus.base !== null ? 100 * r.answer.konus.base : null)) },
          ...series.map((f) => ({ label: `${titleOf(ok[0].answer, f)} bias`, data: rows.map((r) => bias(r, f)) }))] });
        config.options.scales.y2 = { position: "right", grid: { drawOnChartArea: false },
          title: { display: true, text: "Konüs index, base = 100", font: { size: 12 } }, ticks: { font: { size: 11 } } };
        return config;
      },
      table(rows) {
        const el = window.dualcost.el;
        return el("div", { class: "scroll", tabindex: "0", role: "region", "aria-label": "sensitivity table" },
          el("table", { id: "sweep-values" }, el("thead", {}, el("tr", {}, el("th", { text: "point" }), el("th", { text: "Konüs (base)" }), el("th", { text: "Laspeyres bias (points)" }), el("th", { text: "note" }))),
            el("tbody", {}, ...rows.map((r) => el("tr", {}, el("td", { text: r.label }),
              el("td", { text: r.ok ? (r.answer.konus.base === null ? "not a result" : fmt(r.answer.konus.base)) : "" }),
              el("td", { text: r.ok ? (r.answer.laspeyres_gap_points === null ? "not a result" : fmt(r.answer.laspeyres_gap_points, 3)) : "" }),
              el("td", { text: r.ok ? (r.answer.validity.regular ? "" : "outside the regular region") : (r.answer.title || "refused") }))))));
      },
    },
  };

  // Seven lines stay readable (the palette's size): the formulas ticked, else the usual ones.
  const USUAL = ["laspeyres", "paasche", "fisher", "tornqvist", "lowe", "young", "geometric_laspeyres"];
  const seriesOf = (a) => {
    const asked = window.dualcost.state.sent && window.dualcost.state.sent.formulas;
    const pick = asked ? a.formulas : a.formulas.filter((f) => USUAL.includes(f.formula));
    return (pick.length ? pick : a.formulas).slice(0, 7);
  };
  const chartNote = (a) => (seriesOf(a).length < a.formulas.length
    ? `The chart shows ${seriesOf(a).map((f) => f.title).join(", ")}; tick formulas above to choose others (all are in the tables).` : "");
  const series = {
    id: "series",
    title: "Index series",
    intro: "Formula and Konüs series over a panel of periods: the Konüs band, the bias per period "
      + "and per year, and chain drift.",
    path: "/v1/index-series",
    operationId: "indexSeries",
    csv: { columns: "period,item,price[,quantity]", required: ["period", "item", "price"], read: readPanel },
    fields: [
      modelField(),
      { kind: "formulas", pointer: "/formulas", label: "Formulas", scope: "series" },
      { pointer: "/base_period", label: "Base period", kind: "select", optional: true,
        options: (_, body) => (body.periods || []).map((p) => [p, p]) },
      { pointer: "/reference_value", label: "Reference value (1 or 100)", kind: "number", optional: true },
    ],
    grids: panelGrids,
    validity: (a) => (a.konus && a.konus.validity && a.konus.validity.periods_outside_regular_region.length ? {
      title: "The model is outside its regular region in some periods: its Konüs figures there are not results.",
      reasons: [`Periods: ${a.konus.validity.periods_outside_regular_region.join(", ")}`, a.konus.validity.rule] } : null),
    results: [
      { kind: "cards", cards: (a) => {
        const last = a.periods.length - 1;
        const lasp = a.formulas.find((f) => f.formula === "laspeyres");
        const annual = (a.annual_bias?.by_series || []).find((s) => s.series === "laspeyres" && s.kind === "fixed_base");
        return [
          { id: "series-konus-last", label: `Konüs, ${a.periods[last]} (fixed base, base standard)`, value: a.konus ? a.konus.fixed_base.base[last] : null, digits: 3 },
          { id: "series-laspeyres-last", label: `Laspeyres, ${a.periods[last]}`, value: lasp ? lasp.fixed_base[last] : null, digits: 3 },
          { id: "series-annual-bias", label: "Laspeyres bias, percentage points per year", value: annual ? annual.bias_pp_per_year : null, digits: 3 },
        ];
      } },
      { kind: "chart", id: "levels-chart", title: "Fixed-base series and the Konüs band", text: chartNote,
        notices: ["quantities_from_model", "weights_assumed"],
        chart: (a) => {
          const k = a.konus ? a.konus.fixed_base : null;
          const band = k ? C.bandDatasets(a.periods.map((_, t) => Math.min(...["base", "current", "midpoint"].map((s) => k[s][t] ?? Infinity)).valueOf()).map((v) => (Number.isFinite(v) ? v : null)),
            a.periods.map((_, t) => Math.max(...["base", "current", "midpoint"].map((s) => k[s][t] ?? -Infinity))).map((v) => (Number.isFinite(v) ? v : null)),
            "Konüs band (base, current, midpoint standard)") : [];
          return C.lineConfig({ labels: a.periods, xTitle: "period", yTitle: `index (${a.scale.indices})`,
            datasets: [...seriesOf(a).map((f) => ({ label: f.title, data: f.fixed_base })), ...band] });
        } },
      { kind: "chart", id: "bias-series-chart", title: "Bias per period against the Konüs series (index points)",
        when: (a) => a.bias && a.bias.length,
        chart: (a) => {
          const shown = new Set(seriesOf(a).map((f) => f.formula));
          const rows = a.bias.filter((b) => b.kind === "fixed_base" && shown.has(b.series)).slice(0, 7);
          return C.lineConfig({ labels: a.periods, xTitle: "period", yTitle: `bias, ${a.scale.bias}`, zeroAt: 0,
            datasets: rows.map((b) => ({ label: `${titleOf(a, b.series)} (vs Konüs ${b.compared_with})`, data: b.points })) });
        } },
      { kind: "chart", id: "annual-bias-chart", title: "Average bias per year (percentage points per year)",
        when: (a) => a.annual_bias && a.annual_bias.by_series.length,
        height: (a) => 60 + a.annual_bias.by_series.filter((b) => b.kind === "fixed_base").length * 26,
        chart: (a) => {
          const rows = a.annual_bias.by_series.filter((b) => b.kind === "fixed_base");
          return C.barConfig({ labels: rows.map((b) => titleOf(a, b.series)),
            datasets: [{ label: "bias, percentage points per year (fixed base)", data: rows.map((b) => num(b.bias_pp_per_year)) }],
            xTitle: "series", yTitle: "percentage points per year (0 = no bias)" });
        } },
      { kind: "chart", id: "drift-chart", title: "Chain drift: chained against direct (percent)",
        chart: (a) => C.lineConfig({ labels: a.periods, xTitle: "period", yTitle: "chain drift, percent", zeroAt: 0,
          datasets: seriesOf(a).map((f) => ({ label: f.title, data: f.chain_drift_percent })) }) },
      { kind: "table", id: "annual-bias-table", title: "Average annual bias by series",
        when: (a) => a.annual_bias, rows: (a) => a.annual_bias.by_series, columns: [
          { title: "series", get: (b) => titleOf(a0(), b.series) }, { title: "kind", get: (b) => b.kind },
          { title: "vs Konüs", get: (b) => b.compared_with },
          { title: "annual rate %", get: (b) => b.annual_rate_percent, digits: 3 },
          { title: "Konüs annual rate %", get: (b) => b.konus_annual_rate_percent, digits: 3, model: true },
          { title: "bias pp/year", get: (b) => b.bias_pp_per_year, digits: 3, model: true }] },
      { kind: "table", id: "series-table", title: "Fixed-base series by period",
        rows: (a) => a.periods.map((p, t) => ({ p, t, a })),
        columns: (a) => [{ title: "period", get: (r) => r.p },
          ...a.formulas.map((f) => ({ title: f.title, get: (r) => f.fixed_base[r.t], digits: 3 })),
          ...(a.konus ? [{ title: "Konüs (base)", get: (r) => r.a.konus.fixed_base.base[r.t], digits: 3, model: true }] : [])] },
    ],
  };
  const a0 = () => window.dualcost.state.answer;
  const last = (a) => a.summary[a.summary.length - 1];

  const households = {
    id: "households",
    title: "Households",
    intro: "Each household's own Konüs and formula indices: their distribution, the democratic "
      + "(each household counts once) and plutocratic (weighted by spending) aggregates, and quantiles.",
    path: "/v1/household-indices",
    operationId: "householdIndices",
    csv: { columns: "household,expenditure,weight,<one share column per item>", required: ["household", "expenditure"],
      read(records, body, n) {
        const items = (body.items || []).map(itemId);
        body.households = records.map((r, k) => ({ id: r.household.text,
          expenditure: n(r.expenditure, `/households/${k}/expenditure`),
          ...(r.weight ? { weight: n(r.weight, `/households/${k}/weight`) } : {}),
          shares: Object.fromEntries(items.filter((i) => r[i]).map((i) => [i, n(r[i], `/households/${k}/shares/${esc(i)}`)])) }));
        return body;
      } },
    note: "Household CSV: the items and prices stay as in the form; each row gives a household's shares of the items by their ids.",
    fields: [
      modelField(["cobb_douglas", "ces", "stone_geary", "translog", "quadratic", "nested_ces", "aids", "quaids"]),
      { kind: "formulas", pointer: "/formulas", label: "Formulas", scope: "households" },
    ],
    grids: [
      { title: "Prices", rows: { pointer: "/items", title: "item" }, columns: [
        { title: "base price", pointer: "/base_prices/{row}" }, { title: "current price", pointer: "/current_prices/{row}" }] },
      { title: "Prices by period", when: (b) => Array.isArray(b.periods),
        rows: { pointer: "/periods", title: "period", key: (p) => p.period, label: (p) => p.period },
        columnsFrom: { pointer: "/items", cell: "/periods/{r}/prices/{col}" } },
      { title: "Households: budget shares", rows: { pointer: "/households", title: "household" },
        columns: [{ title: "expenditure", pointer: "/households/{r}/expenditure" },
          { title: "weight", pointer: "/households/{r}/weight" }],
        columnsFrom: { pointer: "/items", cell: "/households/{r}/shares/{col}" } },
    ],
    // With several periods, the distribution and the tables are the last period's (named).
    validity: (a) => (a.summary.some((s) => s.households_outside_regular_region) ? {
      title: "Some households are outside the model's regular region: their Konüs figures are not results and are left out of the aggregates.",
      reasons: a.summary.map((s) => `${s.period}: ${s.households_outside_regular_region} of ${s.households} households`) } : null),
    results: [
      { kind: "cards", cards: (a) => {
        const k = last(a).indices.find((i) => i.index === "konus") || {};
        return [
          { id: "hh-konus-democratic", label: "Konüs, democratic (mean over households)", value: k.democratic },
          { id: "hh-konus-plutocratic", label: "Konüs, plutocratic (spending-weighted)", value: k.plutocratic },
          { id: "hh-cv-percent", label: "Compensation, percent of income", value: last(a).cv_percent_of_income, digits: 2 },
        ];
      } },
      { kind: "chart", id: "hh-periods-chart", title: "Konüs aggregates by period (democratic and plutocratic)",
        when: (a) => a.summary.length > 1,
        chart: (a) => {
          const k = (s, f) => { const i = s.indices.find((x) => x.index === "konus"); return i && i[f] !== null ? 100 * i[f] : null; };
          return C.lineConfig({ labels: a.summary.map((s) => s.period), xTitle: "period", yTitle: "Konüs index, base = 100",
            datasets: [{ label: "democratic", data: a.summary.map((s) => k(s, "democratic")) },
              { label: "plutocratic", data: a.summary.map((s) => k(s, "plutocratic")) }] });
        } },
      { kind: "chart", id: "hh-box-chart", title: (a) => `Distribution of household indices, ${last(a).period} (box plots)`,
        height: (a) => 80 + last(a).indices.length * 40,
        chart: (a) => {
          const names = last(a).indices.map((i) => i.index);
          const level = (x) => (x === null || x === undefined ? null : 100 * x);
          const values = (name) => a.households.map((h) => level(name === "konus" ? h.periods[h.periods.length - 1].konus : h.periods[h.periods.length - 1].indices[name]));
          return C.boxConfig({ labels: names.map((n) => (n === "konus" ? "Konüs" : n)), stats: names.map((n) => C.boxStats(values(n))),
            xTitle: "index", yTitle: "index, base = 100" });
        } },
      { kind: "chart", id: "hh-hist-chart", title: (a) => `Household Konüs indices, ${last(a).period}: histogram`,
        chart: (a) => {
          const h = C.histogram(a.households.map((x) => (x.periods[x.periods.length - 1].konus === null ? NaN : 100 * x.periods[x.periods.length - 1].konus)));
          return C.barConfig({ labels: h.labels.map((l) => Number(l).toFixed(2)), datasets: [{ label: "households", data: h.counts }],
            xTitle: "Konüs index, base = 100 (bin middle)", yTitle: "households", horizontal: false });
        } },
      { kind: "chart", id: "hh-bias-chart", title: (a) => `How much Laspeyres overstates each household's Konüs index, ${last(a).period}`,
        when: (a) => a.households.some((h) => h.periods[h.periods.length - 1].bias_points && h.periods[h.periods.length - 1].bias_points.laspeyres !== undefined),
        chart: (a) => {
          const h = C.histogram(a.households.map((x) => (x.periods[x.periods.length - 1].bias_points || {}).laspeyres ?? NaN));
          return C.barConfig({ labels: h.labels.map((l) => Number(l).toFixed(3)), datasets: [{ label: "households", data: h.counts }],
            xTitle: "Laspeyres bias, index points (bin middle)", yTitle: "households", horizontal: false, zeroAt: null });
        } },
      { kind: "chart", id: "hh-aggregate-chart", title: (a) => `Democratic and plutocratic aggregates, ${last(a).period}`,
        height: (a) => 80 + last(a).indices.length * 40,
        chart: (a) => {
          const rows = last(a).indices;
          return C.barConfig({ labels: rows.map((i) => i.index), datasets: [
            { label: "democratic (points above 100)", data: rows.map((i) => 100 * (i.democratic - 1)) },
            { label: "plutocratic (points above 100)", data: rows.map((i) => 100 * (i.plutocratic - 1)) }],
          xTitle: "index", yTitle: "index points above 100" });
        } },
      { kind: "table", id: "hh-summary-table", title: (a) => `Aggregates and quantiles, ${last(a).period}`,
        rows: (a) => last(a).indices,
        columns: (a) => [{ title: "index", get: (i) => i.index }, { title: "democratic", get: (i) => i.democratic },
          { title: "plutocratic", get: (i) => i.plutocratic },
          ...(last(a).indices[0]?.quantiles || []).map((q, k) => ({ title: `q${q.probability}`, get: (i) => i.quantiles[k].value })),
          { title: "min", get: (i) => i.minimum }, { title: "max", get: (i) => i.maximum }] },
      { kind: "table", id: "hh-table", title: (a) => `Each household, ${last(a).period}`,
        rows: (a) => a.households,
        columns: [{ title: "household", get: (h) => h.household }, { title: "Konüs", get: (h) => h.periods[h.periods.length - 1].konus, model: true },
          { title: "CV %", get: (h) => h.periods[h.periods.length - 1].cv_percent, digits: 2, model: true },
          { title: "Laspeyres bias (points)", get: (h) => (h.periods[h.periods.length - 1].bias_points || {}).laspeyres, digits: 3, model: true }] },
    ],
  };

  const fits = {
    id: "fits",
    title: "Fits",
    intro: "A preference model fitted to budget data: estimates with confidence intervals, "
      + "elasticities, tests and whether the fitted model is regular over the sample.",
    path: "/v1/fits",
    operationId: "fitModel",
    action: "Fit",
    csv: { columns: "observation,item,price,expenditure", required: ["observation", "item", "price", "expenditure"],
      read(records, body, n) {
        const obs = [];
        const items = [];
        for (const r of records) {
          if (!obs.includes(r.observation.text)) obs.push(r.observation.text);
          if (!items.includes(r.item.text)) items.push(r.item.text);
        }
        const grid = () => obs.map(() => items.map(() => null));
        const prices = grid();
        const spend = grid();
        for (const r of records) {
          const t = obs.indexOf(r.observation.text);
          const i = items.indexOf(r.item.text);
          prices[t][i] = n(r.price, `/prices/${t}/${i}`);
          spend[t][i] = n(r.expenditure, `/expenditures/${t}/${i}`);
        }
        Object.assign(body, { observations: obs, items, prices, expenditures: spend });
        return body;
      } },
    fields: [
      modelField(["ces", "nested_ces", "stone_geary", "aids", "quaids"]),
      { pointer: "/confidence_level", label: "Confidence level", kind: "number", optional: true },
    ],
    grids: [
      { title: "Prices by observation", rows: { pointer: "/observations", title: "observation" },
        columnsFrom: { pointer: "/items", cell: "/prices/{r}/{col}" } },
      { title: "Expenditure by observation", when: (b) => !b.shares, rows: { pointer: "/observations", title: "observation" },
        columnsFrom: { pointer: "/items", cell: "/expenditures/{r}/{col}" } },
      { title: "Budget shares by observation", when: (b) => Boolean(b.shares), rows: { pointer: "/observations", title: "observation" },
        columns: [{ title: "total expenditure", pointer: "/total_expenditure/{r}", keep: true },
          { title: "weight", pointer: "/weights/{r}", keep: true }],
        columnsFrom: { pointer: "/items", cell: "/shares/{r}/{col}" } },
    ],
    validity: (a) => {
      const r = a.regularity;
      const bad = r.monotonicity_violations + r.concavity_violations + r.outside_domain;
      return bad ? { title: "The fitted model is not regular at every observation: figures computed there are not results.",
        reasons: [`monotonicity violated at ${r.monotonicity_violations}, concavity at ${r.concavity_violations}, outside the domain at ${r.outside_domain} of ${r.observations_checked} observations`, ...r.notes] } : null;
    },
    results: [
      { kind: "cards", cards: (a) => [
        { id: "fit-observations", label: "observations", value: a.fit.observations, digits: 0 },
        { id: "fit-iterations", label: "iterations (converged: " + a.fit.converged + ")", value: a.fit.iterations, digits: 0 },
        { id: "fit-regular", label: "observations where the model is regular", value: a.regularity.observations_checked - a.regularity.monotonicity_violations - a.regularity.concavity_violations, digits: 0 },
      ] },
      { kind: "chart", id: "estimates-chart", title: "Estimates with confidence intervals",
        height: (a) => 60 + a.parameters.length * 26,
        chart: (a) => ({ ...C.barConfig({ labels: a.parameters.map((p) => p.name),
          datasets: [{ label: `${Math.round(100 * a.confidence_level)}% interval`, order: 2, data: a.parameters.map((p) => (p.ci_low === null ? null : [p.ci_low, p.ci_high])) },
            { type: "line", indexAxis: "y", showLine: false, label: "estimate", data: a.parameters.map((p) => p.estimate),
              pointStyle: "rectRot", pointRadius: 6, order: 1, borderColor: "#000", backgroundColor: "#000" }],
          xTitle: "parameter", yTitle: "estimate (parameter units)" }) }) },
      { kind: "table", id: "parameters-table", title: "Estimates", rows: (a) => a.parameters, columns: [
        { title: "parameter", get: (p) => p.name }, { title: "estimate", get: (p) => p.estimate },
        { title: "std. error", get: (p) => p.std_error }, { title: "ci low", get: (p) => p.ci_low },
        { title: "ci high", get: (p) => p.ci_high }, { title: "p-value", get: (p) => p.p_value },
        { title: "kind", get: (p) => p.kind }] },
      { kind: "chart", id: "elasticities-chart", title: "Elasticities at the sample means",
        height: (a) => 60 + Object.keys(a.elasticities.expenditure_elasticities || {}).length * 40,
        chart: (a) => {
          const items = Object.keys(a.elasticities.expenditure_elasticities || {});
          const own = (i) => (a.elasticities.marshallian?.[i]?.[i]?.estimate ?? null);
          return C.barConfig({ labels: items, datasets: [
            { label: "expenditure elasticity", data: items.map((i) => a.elasticities.expenditure_elasticities[i].estimate) },
            { label: "own-price elasticity (uncompensated)", data: items.map(own) }],
          xTitle: "item", yTitle: "elasticity (0 = no response)" });
        } },
      { kind: "table", id: "tests-table", title: "Tests", when: (a) => a.tests.length, rows: (a) => a.tests, columns: [
        { title: "hypothesis", get: (t) => t.hypothesis }, { title: "test", get: (t) => t.test },
        { title: "statistic", get: (t) => t.statistic, digits: 3 }, { title: "df", get: (t) => t.df, digits: 0 },
        { title: "p-value", get: (t) => t.p_value }, { title: "imposed", get: (t) => (t.imposed ? "yes" : "no") }] },
      { kind: "text", title: "Regularity over the sample", text: (a) => {
        const r = a.regularity;
        return `Checked at ${r.observations_checked} observations: monotonicity violated at ${r.monotonicity_violations}, `
          + `concavity at ${r.concavity_violations}, symmetry at ${r.symmetry_violations}, outside the domain at ${r.outside_domain}.`;
      } },
    ],
  };

  // Fit, then compare with the fitted model: the bias of each formula with its interval from the
  // estimate's uncertainty (the answer's `intervals`). The fit's own blocks are reused.
  const fitted = {
    id: "fitted",
    title: "Fit and compare",
    intro: "A model fitted to budget data, then a comparison of two price situations under it: "
      + "how much each formula overstates the Konüs index, with intervals from the estimate's uncertainty.",
    path: "/v1/fitted-comparisons",
    operationId: "fitAndCompare",
    action: "Fit and compare",
    downloads: ["json"],
    csv: fits.csv,
    fields: [
      ...fits.fields,
      { pointer: "/comparison/base/expenditure", label: "Base income for the comparison", kind: "number", optional: true },
      { pointer: "/uncertainty/draws", label: "Draws for the intervals", kind: "number", optional: true },
    ],
    grids: [
      { title: "Prices compared", rows: { pointer: "/items", title: "item" }, columns: [
        { title: "base price", pointer: "/comparison/base/prices/{row}" },
        { title: "current price", pointer: "/comparison/current/prices/{row}" }] },
      ...fits.grids,
    ],
    validity: (a) => validityBox(a.comparison),
    results: [
      { kind: "cards", cards: (a) => {
        const k = a.intervals ? a.intervals.konus.base : null;
        const lasp = a.intervals ? a.intervals.formulas.find((f) => f.formula === "laspeyres") : null;
        return [
          { id: "fitted-konus", label: "Konüs index (base standard)", value: a.comparison.konus.base, withheld: !a.comparison.validity.regular },
          { id: "fitted-konus-low", label: "its interval, low", value: k ? k.low : null },
          { id: "fitted-konus-high", label: "its interval, high", value: k ? k.high : null },
          { id: "fitted-laspeyres-bias", label: "Laspeyres bias, index points", value: lasp ? lasp.bias_points.estimate : a.comparison.laspeyres_gap_points, digits: 3 },
        ];
      } },
      { kind: "chart", id: "fitted-bias-chart", title: "How much each formula overstates the Konüs index, with intervals",
        when: (a) => a.intervals && a.comparison.validity.regular,
        text: (a) => (weighted(a.comparison).length < a.comparison.formulas.length
          ? "Unweighted formulas (Carli, Jevons, Dutot) are in the table below: their gaps, of another order, would flatten this chart." : ""),
        height: (a) => 90 + weighted(a.comparison).length * 42,
        chart: (a) => {
          const keep = new Set(weighted(a.comparison).map((f) => f.formula));
          const rows = a.intervals.formulas.filter((f) => keep.has(f.formula));
          const config = C.barConfig({ labels: rows.map((f) => titleOf(a.comparison, f.formula)),
            datasets: [{ label: `${Math.round(100 * a.intervals.confidence_level)}% interval, index points`, order: 2,
              data: rows.map((f) => [f.bias_points.low, f.bias_points.high]) },
            { type: "line", indexAxis: "y", showLine: false, label: "estimate", order: 1, pointStyle: "rectRot", pointRadius: 6,
              borderColor: "#000", backgroundColor: "#000", data: rows.map((f) => f.bias_points.estimate) }],
            xTitle: "formula", yTitle: "bias, index points on base 100 (0 = no bias)" });
          return config;
        } },
      { kind: "table", id: "fitted-bias-table", title: "Bias by formula, with intervals", when: (a) => a.intervals,
        rows: (a) => a.intervals.formulas, columns: [
          { title: "formula", get: (f) => titleOf(a0().comparison, f.formula) },
          { title: "bias (points)", get: (f) => f.bias_points.estimate, digits: 3 },
          { title: "low", get: (f) => f.bias_points.low, digits: 3 }, { title: "high", get: (f) => f.bias_points.high, digits: 3 },
          { title: "bias (%)", get: (f) => f.bias_percent.estimate, digits: 3 }] },
      { kind: "text", title: "How the intervals were drawn", when: (a) => a.intervals, text: (a) => `${a.intervals.method}; ${a.intervals.draws} draws, ${a.intervals.draws_failed} failed.` },
      ...fits.results.filter((b) => b.kind !== "cards").map((b) => ({ ...b, id: b.id ? `fitted-${b.id}` : b.id,
        when: (a) => (b.when ? b.when(a.fit) : true), rows: b.rows && ((a) => b.rows(a.fit)),
        chart: b.chart && ((a) => b.chart(a.fit)), text: b.text && ((a) => b.text(a.fit)),
        height: b.height && ((a) => b.height(a.fit)) })),
    ],
  };

  const audits = {
    id: "audits",
    title: "Audits",
    intro: "Published index numbers recomputed from their panel: each difference against its "
      + "rounding tolerance, the failures flagged.",
    path: "/v1/audits",
    operationId: "auditPublishedSeries",
    action: "Audit",
    csv: { columns: "the panel (period,item,price[,quantity]) or the published values (formula,series,period,value)",
      required: ["period"],
      read(records, body, n) {
        if (!records[0].formula) return readPanel(records, body, n);
        // The decimals each value was published to are read from how it is written (101.2: 1).
        body.published = records.map((r, k) => ({ formula: r.formula.text, period: r.period.text,
          ...(r.series ? { series: r.series.text } : {}), value: n(r.value, `/published/${k}/value`),
          decimals: (r.value.text.split(".")[1] || "").length }));
        return body;
      } },
    note: "A published-values file replaces the published rows and keeps the panel; a panel file keeps the published rows. "
      + "Each value's decimals are read from how it is written (101.2: one decimal).",
    fields: [
      { pointer: "/base_period", label: "Base period", kind: "select", optional: true,
        options: (_, body) => (body.periods || []).map((p) => [p, p]) },
      { pointer: "/reference_value", label: "Reference value", kind: "number", optional: true },
    ],
    grids: [
      { title: "Published values", rows: { pointer: "/published", title: "row", label: (_, r) => String(r + 1) },
        columns: [{ title: "formula", pointer: "/published/{r}/formula", kind: "text", keep: true },
          { title: "series", pointer: "/published/{r}/series", kind: "text", keep: true },
          { title: "period", pointer: "/published/{r}/period", kind: "text", keep: true },
          { title: "value", pointer: "/published/{r}/value", keep: true },
          { title: "decimals", pointer: "/published/{r}/decimals", keep: true }] },
      ...panelGrids,
    ],
    results: [
      { kind: "cards", cards: (a) => [
        { id: "audit-checked", label: "published values checked", value: a.checked, digits: 0 },
        { id: "audit-failed", label: "differences beyond the tolerance", value: a.failed, digits: 0 }] },
      { kind: "chart", id: "audit-chart", title: "Published minus recomputed, against the rounding tolerance",
        height: (a) => 90 + a.rows.length * 40,
        chart: (a) => C.barConfig({ labels: a.rows.map((r) => [`${r.formula}, ${r.period}`, `${r.series}${r.passed ? "" : ": DIFFERS"}`]), datasets: [
          { label: "published − recomputed (index points)", data: a.rows.map((r) => r.difference),
            backgroundColor: a.rows.map((r) => (r.passed ? C.PALETTE[0] : C.PALETTE[3])) },
          { label: "tolerance (±)", data: a.rows.map((r) => [-r.tolerance, r.tolerance]), backgroundColor: "rgba(0,0,0,0.12)", grouped: false }],
        xTitle: "published value", yTitle: "difference, index points (0 = agrees)" }) },
      { kind: "table", id: "audit-table", title: "Published and recomputed", rows: (a) => a.rows,
        flag: (r) => !r.passed, columns: [
          { title: "formula", get: (r) => r.formula }, { title: "series", get: (r) => r.series },
          { title: "period", get: (r) => r.period }, { title: "published", get: (r) => r.published },
          { title: "recomputed", get: (r) => r.recomputed }, { title: "difference", get: (r) => r.difference },
          { title: "tolerance", get: (r) => r.tolerance }, { title: "result", get: (r) => (r.passed ? "agrees" : "DIFFERS") }] },
      { kind: "text", text: (a) => a.tolerance_rule },
    ],
  };

  window.dualcostViews = [comparison, series, households, fits, fitted, audits];
  window.dualcost.boot(window.dualcostViews).catch((e) => {
    const box = document.getElementById("error");
    box.textContent = String(e);
    box.hidden = false;
  });
})();
