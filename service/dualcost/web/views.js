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

  // A two-period basket (item,base_price,current_price,base_quantity|base_share[,current_quantity]).
  function readBasket(records, body, n) {
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
    return body;
  }
  const leaves = (g) => (typeof g === "string" ? [g] : (g.children || []).flatMap(leaves));
  const basketCsv = { columns: "item,base_price,current_price,base_quantity or base_share[,current_quantity]",
    required: ["item", "base_price", "current_price"] };
  const basketGrid = { title: "Items", rows: { pointer: "/items", title: "item" }, columns: [
    { title: "base price", pointer: "/base/prices/{row}" },
    { title: "current price", pointer: "/current/prices/{row}" },
    { title: "base quantity", pointer: "/base/quantities/{row}" },
    { title: "base share", pointer: "/base/shares/{row}" },
    { title: "current quantity (observed)", pointer: "/current/quantities/{row}" }] };

  // The model-free bracket (lower, upper) per period with Laspeyres, Paasche and, where the
  // answer has it, the model's Konüs index; ratios drawn on base 100.
  const h = (x) => (x === null || x === undefined ? null : 100 * x);
  const bandOf = (ranges, m) => ranges.find((r) => r.measure === m) || {};
  const boundsChart = (rows, base) => C.lineConfig({ labels: rows.map((r) => r.period), xTitle: "period",
    yTitle: `index, ${base} = 100`, datasets: [
      ...C.bandDatasets(rows.map((r) => h(r.lower)), rows.map((r) => h(r.upper)), "model-free bracket (lower to upper)"),
      { label: "Laspeyres (bounds K at the base standard from above)", colour: C.PALETTE[0], data: rows.map((r) => h(r.laspeyres)) },
      { label: "Paasche (bounds K at each period's standard from below)", colour: C.PALETTE[1], data: rows.map((r) => h(r.paasche)) },
      ...(rows.some((r) => r.konus_base !== undefined && r.konus_base !== null)
        ? [{ label: "the model's Konüs index (base standard)", colour: "#000", borderWidth: 3, data: rows.map((r) => h(r.konus_base)) }] : [])] });
  const boundsColumns = [{ title: "period", get: (r) => r.period }, { title: "lower", get: (r) => r.lower },
    { title: "upper", get: (r) => r.upper }, { title: "Laspeyres", get: (r) => r.laspeyres }, { title: "Paasche", get: (r) => r.paasche }];
  const withKonus = [...boundsColumns, { title: "model Konüs", get: (r) => r.konus_base, model: true },
    { title: "inside?", get: (r) => (r.konus_inside === null ? "" : r.konus_inside ? "yes" : "NO") }];
  const revealedField = (needs) => ({ kind: "checkbox", pointer: "/revealed_bounds",
    label: "Also the model-free bracket (revealed preference)", hint: needs });

  const panelGrids = [
    { title: "Prices by period", rows: { pointer: "/periods", title: "period" },
      columnsFrom: { pointer: "/items", cell: "/prices/{r}/{col}" },
      hint: "An empty cell: the item is not priced in that period." },
    { title: "Quantities by period", rows: { pointer: "/periods", title: "period" },
      columnsFrom: { pointer: "/items", cell: "/quantities/{r}/{col}" } },
  ];

  // `shares(body)`: the base budget shares the view observes by item id (null: none), from which
  // AIDS, QUAIDS and the formula families get starting values when chosen (workspace.js, GENERATED).
  const modelField = (families, shares) => ({ kind: "model", pointer: "/model", label: "Preference model", families, shares });
  const at = (v, id, k) => (v === null || v === undefined ? undefined : Array.isArray(v) ? v[k] : v[id]);
  const ids = (body) => (body.items || []).map(itemId);
  // A two-period basket: its base shares, or the base prices times the base quantities.
  const basketShares = (body) => {
    const b = body.base || {};
    if (b.shares) return Object.fromEntries(ids(body).map((id, k) => [id, at(b.shares, id, k)]));
    if (!b.prices || !b.quantities) return null;
    return Object.fromEntries(ids(body).map((id, k) => [id, at(b.prices, id, k) * at(b.quantities, id, k)]));
  };
  // A panel: the base period's prices times its quantities, where it has quantities, over the
  // items priced in the base period (the series' model is over those; one not bought spends nothing).
  const panelShares = (body) => {
    const t = Math.max(0, (body.periods || []).indexOf(body.base_period));
    const p = (body.prices || [])[t];
    const q = (body.quantities || [])[t];
    if (!p || !q) return null;
    const priced = ids(body).map((id, k) => [id, k]).filter(([id, k]) => at(p, id, k) !== null && at(p, id, k) !== undefined);
    return Object.fromEntries(priced.map(([id, k]) => [id, at(p, id, k) * (at(q, id, k) ?? 0)]));
  };

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
    csv: { ...basketCsv,
      read(records, body, n) {
        readBasket(records, body, n);
        const ids = records.map((r) => r.item.text);
        const tree = body.model && body.model.tree;
        if (!body.model || (tree && leaves(tree).sort().join() !== ids.slice().sort().join())) {
          body.model = { family: "ces", sigma: 0.7 };
          window.dualcost.say("The file's items are not the tree's: the model is now CES with σ 0.7. "
            + "Choose the family and its parameters (or build the tree) above.");
        }
        return body;
      } },
    fields: [
      modelField(undefined, basketShares),
      { kind: "formulas", pointer: "/formulas", label: "Formulas", scope: "comparison" },
      { pointer: "/base/expenditure", label: "Base income m0 (with shares)", kind: "number", optional: true },
      { pointer: "/current/expenditure", label: "Current income m1", kind: "number", optional: true,
        hint: "Empty: base income, or the cost of observed current quantities." },
      { pointer: "/reference_income", label: "Reference income (at base prices)", kind: "number", optional: true },
      { pointer: "/lloyd_moulton_sigma", label: "σ for Lloyd-Moulton", kind: "number", optional: true },
      revealedField("Needs observed current quantities: the two bundles alone bracket K(u0)."),
      { pointer: "/band_models", label: "Band across these models (JSON list, as the sensitivity's models)", kind: "json", rows: 2, optional: true },
    ],
    grids: [basketGrid],
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
      // The model-free bracket, when asked for, right under the model's figures.
      { kind: "cards", when: (a) => a.band, cards: (a) => [
        { id: "band-low", label: `K(u0) across ${a.band.models.length} other models: lowest`, value: bandOf(a.band.ranges, "konus_base").low },
        { id: "band-high", label: "highest", value: bandOf(a.band.ranges, "konus_base").high },
        { id: "band-inside", label: "the model's K(u0) inside the band?", value: a.band.konus_inside === null ? "" : a.band.konus_inside ? "yes" : "NO" }] },
      { kind: "cards", when: (a) => a.revealed_bounds, cards: (a) => [
        { id: "rb-lower", label: "Model-free bracket, lower", value: a.revealed_bounds.lower },
        { id: "rb-upper", label: "Model-free bracket, upper", value: a.revealed_bounds.upper },
        { id: "rb-konus", label: "the model's Konüs index, base standard", value: a.revealed_bounds.konus_base, withheld: a.revealed_bounds.konus_base === null },
        { id: "rb-inside", label: "inside the bracket?", value: a.revealed_bounds.konus_inside === null ? "" : a.revealed_bounds.konus_inside ? "yes" : "NO" }] },
      { kind: "chart", id: "bracket-chart", title: "The model's Konüs index inside the model-free bracket and the band across models",
        when: (a) => a.revealed_bounds || a.band, height: () => 220, notices: ["garp_failed"],
        text: (a) => (a.revealed_bounds ? `${a.revealed_bounds.garp ? "The two bundles pass GARP." : `The two bundles fail GARP (Afriat's index ${fmt(a.revealed_bounds.efficiency_index)}); the bracket holds at efficiency ${fmt(a.revealed_bounds.efficiency_level)}.`} ${a.revealed_bounds.method}` : ""),
        chart: (a) => {
          const b = a.revealed_bounds;
          const band = a.band ? bandOf(a.band.ranges, "konus_base") : null;
          const labels = [...(b ? ["model-free bracket"] : []), ...(band ? [`band across ${a.band.models.length} models`] : [])];
          const at = (v, which) => labels.map((l) => (l.startsWith(which) ? h(v) : null));
          const dot = (label, data, colour) => ({ type: "line", indexAxis: "y", showLine: false, label, data,
            pointStyle: "rectRot", pointRadius: 7, borderColor: colour, backgroundColor: colour, order: 1 });
          const k = a.validity.regular ? a.konus.base : null;
          return loose(C.barConfig({ labels, xTitle: "", yTitle: "index, base = 100", zeroAt: null, datasets: [
            { label: "lowest to highest", order: 2, backgroundColor: "rgba(0,0,0,0.15)",
              data: labels.map((l) => (l.startsWith("model-free") ? [h(b.lower), h(b.upper)] : [h(band.low), h(band.high)])) },
            ...(b ? [dot("Laspeyres", at(b.laspeyres, "model-free"), C.PALETTE[0]), dot("Paasche", at(b.paasche, "model-free"), C.PALETTE[1])] : []),
            ...(k === null ? [] : [dot("the model's Konüs index K(u0)", labels.map(() => h(k)), "#000")])] }));
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
      source: "bySweep",
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
      chart: (rows, kind) => sweepChart(rows, kind === "family" ? "preference family" : "σ (or the tree's σ scaled)"),
      table: (rows) => sweepTable(rows),
    },
  };

  // The Konüs index and each bias along a sweep's points ({label, ok, answer} rows).
  function sweepChart(rows, xTitle) {
    const ok = rows.filter((r) => r.ok);
    const formulas = ok.length ? ok[0].answer.formulas.map((f) => f.formula) : [];
    const series = ["laspeyres", "paasche", "fisher", "tornqvist", "lowe", "young"].filter((f) => formulas.includes(f));
    const labels = rows.map((r) => r.label);
    const bias = (r, f) => (r.ok ? num((r.answer.formulas.find((x) => x.formula === f) || {}).bias_points) : null);
    const config = C.lineConfig({ labels, xTitle,
      yTitle: "bias, index points (0 = no bias)", zeroAt: 0,
      datasets: [{ label: "Konüs index, base = 100 (right axis)", yAxisID: "y2", colour: "#000", borderWidth: 3,
        data: rows.map((r) => (r.ok && r.answer.konus.base !== null ? 100 * r.answer.konus.base : null)) },
      ...series.map((f) => ({ label: `${titleOf(ok[0].answer, f)} bias`, data: rows.map((r) => bias(r, f)) }))] });
    config.options.scales.y2 = { position: "right", grid: { drawOnChartArea: false },
      title: { display: true, text: "Konüs index, base = 100", font: { size: 12 } }, ticks: { font: { size: 11 } } };
    return config;
  }
  function sweepTable(rows) {
    const el = window.dualcost.el;
    return el("div", { class: "scroll", tabindex: "0", role: "region", "aria-label": "sensitivity table" },
      el("table", { id: "sweep-values" }, el("thead", {}, el("tr", {}, el("th", { text: "point" }), el("th", { text: "Konüs (base)" }), el("th", { text: "Laspeyres bias (points)" }), el("th", { text: "note" }))),
        el("tbody", {}, ...rows.map((r) => el("tr", {}, el("td", { text: r.label }),
          el("td", { text: r.ok ? (r.answer.konus.base === null ? "not a result" : fmt(r.answer.konus.base)) : "" }),
          el("td", { text: r.ok ? (r.answer.laspeyres_gap_points === null ? "not a result" : fmt(r.answer.laspeyres_gap_points, 3)) : "" }),
          el("td", { text: r.ok ? (r.answer.validity.regular ? "" : "outside the regular region") : (r.answer.title || "refused") }))))));
  }
  // A floating-bar chart's value axis starts where the values are, not at zero.
  const loose = (config) => { config.options.scales[config.options.indexAxis === "y" ? "x" : "y"].beginAtZero = false; return config; };

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
      modelField(undefined, panelShares),
      { kind: "formulas", pointer: "/formulas", label: "Formulas", scope: "series" },
      { pointer: "/base_period", label: "Base period", kind: "select", optional: true,
        options: (_, body) => (body.periods || []).map((p) => [p, p]) },
      { pointer: "/reference_value", label: "Reference value (1 or 100)", kind: "number", optional: true },
      { pointer: "/rebase/period", label: "Rebase the change measures to period", kind: "select", optional: true, prune: true,
        options: (_, body) => (body.periods || []).map((p) => [p, p]) },
      revealedField("Needs quantities in every period: GARP and each period's bracket, over the items priced throughout."),
      { pointer: "/band_models", label: "Band across these models (JSON list of models)", kind: "json", rows: 2, optional: true },
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
      { kind: "chart", id: "changes-chart", title: "Change measures of the fixed-base series and the Konüs series",
        choose: { label: "Measure", options: (a) => changeMeasures(a) },
        height: () => 340, text: (a) => a.changes.definitions.twelve_month_percent,
        chart: (a, m) => {
          const rows = changeSeries(a);
          if (m === "annual") {
            const years = [...new Set(rows.flatMap((r) => r.annual.map((y) => y.year)))];
            return C.barConfig({ labels: years.map(String), horizontal: false, xTitle: "year", yTitle: "annual average over the previous year's, %",
              datasets: rows.map((r) => ({ label: changeLabel(a, r), data: years.map((y) => num((r.annual.find((x) => x.year === y) || {}).change_percent)),
                ...(r.series === "konus" ? { backgroundColor: "#000", borderColor: "#000" } : {}) })) });
          }
          return C.lineConfig({ labels: a.periods, xTitle: "period", zeroAt: m === "rebased" ? null : 0,
            yTitle: m === "rebased" ? `level, ${rebasedTo(a)} = ${a.reference_value}` : "change, percent",
            datasets: rows.map((r) => ({ label: changeLabel(a, r), data: r[m],
              ...(r.series === "konus" ? { colour: "#000", borderWidth: 3 } : {}) })) });
        },
        table: (a, m) => {
          const rows = changeSeries(a);
          if (m === "annual") {
            const years = [...new Set(rows.flatMap((r) => r.annual.map((y) => y.year)))];
            return { rows: years, columns: [{ title: "year", get: (y) => String(y) }, ...rows.map((r) => ({ title: changeLabel(a, r), digits: 3,
              get: (y) => (r.annual.find((x) => x.year === y) || {}).change_percent }))] };
          }
          return { rows: a.periods.map((p, t) => ({ p, t })), columns: [{ title: "period", get: (x) => x.p },
            ...rows.map((r) => ({ title: changeLabel(a, r), get: (x) => r[m][x.t], digits: 3 }))] };
        } },
      { kind: "chart", id: "series-bounds-chart", title: "The Konüs series inside the model-free bracket",
        when: (a) => a.revealed_bounds, notices: ["revealed_bounds_items", "garp_failed"],
        text: (a) => `${a.revealed_bounds.consistency.garp ? "The panel passes GARP." : `The panel fails GARP; the brackets hold at efficiency ${fmt(a.revealed_bounds.efficiency_level)}.`} Items: ${a.revealed_bounds.items.join(", ")}.`,
        chart: (a) => boundsChart(a.revealed_bounds.rows, a.revealed_bounds.base_period) },
      { kind: "chart", id: "series-band-chart", title: "The Konüs series and the band across other models", when: (a) => a.band,
        text: (a) => a.band.measure,
        chart: (a) => C.lineConfig({ labels: a.periods, xTitle: "period", yTitle: `Konüs index at base utility (${a.scale.indices})`, datasets: [
          ...C.bandDatasets(a.band.rows.map((r) => r.konus_low), a.band.rows.map((r) => r.konus_high), `band across ${a.band.models.length} models`),
          { label: "this series' model", colour: "#000", borderWidth: 3, data: a.band.rows.map((r) => r.konus) },
          ...a.band.models.map((m) => ({ label: m.family, data: m.fixed_base, borderDash: [4, 3], pointRadius: 0 }))] }),
        table: (a) => ({ rows: a.band.rows, columns: [{ title: "period", get: (r) => r.period }, { title: "low", get: (r) => r.konus_low, digits: 3 },
          { title: "high", get: (r) => r.konus_high, digits: 3 }, { title: "this model", get: (r) => r.konus, digits: 3, model: true },
          { title: "inside?", get: (r) => (r.konus_inside === null ? "" : r.konus_inside ? "yes" : "NO") }] }) },
      { kind: "table", id: "series-bounds-table", title: "Model-free brackets by period (ratios to the base period)",
        when: (a) => a.revealed_bounds, rows: (a) => a.revealed_bounds.rows, columns: withKonus },
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
  // The change measures shown: the charted formulas' fixed-base series and the Konüs series at
  // the base standard (answer.changes.by_series).
  const changeSeries = (a) => {
    const shown = new Set(seriesOf(a).map((f) => f.formula));
    return a.changes.by_series.filter((r) => r.kind === "fixed_base" && (shown.has(r.series) || (r.series === "konus" && r.standard === "base")));
  };
  const changeLabel = (a, r) => (r.series === "konus" ? "Konüs (base standard)" : titleOf(a, r.series));
  const rebasedTo = (a) => (a.changes.rebased_to ? a.changes.rebased_to.period || a.changes.rebased_to.year : "");
  const changeMeasures = (a) => [["twelve_month_percent", "12-month change, %"], ["period_on_period_percent", "period-on-period change, %"],
    ["annual", "annual average over the previous year's, %"], ...(a.changes.rebased_to ? [["rebased", `levels rebased to ${rebasedTo(a)}`]] : [])];
  const a0 = () => window.dualcost.state.answer;
  const last = (a) => a.summary[a.summary.length - 1];

  // The band across band_models, per household at period t (the households' own K(u0) beside it).
  const BAND_SHOWN = 40;
  const hasBand = (a) => a.households.some((x) => x.periods.some((p) => p.band));
  const bandRows = (a, t) => a.households.filter((x) => x.periods[t] && x.periods[t].band)
    .map((x) => ({ household: x.household ?? `row ${x.row}`, konus: x.periods[t].konus, band: x.periods[t].band }));
  // The models asked for (each household's band counts those whose K(u0) is a result there).
  const bandModels = (a) => {
    const asked = (window.dualcost.state.sent || {}).band_models;
    return asked ? asked.length : Math.max(...a.households.flatMap((x) => x.periods.map((p) => (p.band ? p.band.models : 0))));
  };
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
      modelField(["cobb_douglas", "ces", "stone_geary", "translog", "quadratic", "nested_ces", "aids", "quaids"], () => null),
      { kind: "formulas", pointer: "/formulas", label: "Formulas", scope: "households" },
      { pointer: "/band_models", label: "Band across these models (JSON list of models, as the comparison's)", kind: "json", rows: 2, optional: true,
        hint: "Each household is also evaluated under each of these models: its band is the least and greatest K(u0) among them." },
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
      { kind: "cards", when: hasBand, cards: (a) => {
        const rows = bandRows(a, a.summary.length - 1);
        return [
          { id: "hh-band-models", label: "models in the band", value: String(bandModels(a)) },
          { id: "hh-band-outside", label: `households whose K(u0) lies outside the band, ${last(a).period}`, value: String(rows.filter((r) => r.band.konus_inside === false).length) },
          { id: "hh-band-inside", label: "inside the band", value: String(rows.filter((r) => r.band.konus_inside === true).length) }];
      } },
      { kind: "chart", id: "hh-band-chart", title: "Each household's Konüs index K(u0) and its band across the other models",
        when: hasBand, notices: ["band_households_left_out"],
        choose: { label: "Period", options: (a) => a.summary.map((s, t) => [t, s.period]), initial: (a) => a.summary.length - 1 },
        height: (a) => 110 + Math.min(a.households.length, BAND_SHOWN) * 28,
        text: (a) => `The band: the lowest to the highest K(u0) of the household under the ${bandModels(a)} models of band_models (same prices, shares and income); flagged rows of the table: this batch's K(u0) lies outside it. `
          + (a.households.length > BAND_SHOWN ? `The chart shows the first ${BAND_SHOWN} of ${a.households.length} households; the table has them all.` : ""),
        chart: (a, t) => {
          const rows = bandRows(a, t).slice(0, BAND_SHOWN);
          return loose(C.barConfig({ labels: rows.map((r) => r.household), xTitle: "household", yTitle: "Konüs index K(u0), base = 100", zeroAt: null,
            datasets: [{ label: "band across the models: lowest to highest K(u0)", order: 2,
              data: rows.map((r) => (r.band.konus_low === null ? null : [h(r.band.konus_low), h(r.band.konus_high)])) },
            { type: "line", indexAxis: "y", showLine: false, label: "K(u0) of this batch's model", order: 1, pointStyle: "rectRot", pointRadius: 6,
              borderColor: "#000", backgroundColor: "#000", data: rows.map((r) => h(r.konus)) }] }));
        },
        table: (a, t) => ({ rows: bandRows(a, t), flag: (r) => r.band.konus_inside === false, columns: [{ title: "household", get: (r) => r.household },
          { title: "band low", get: (r) => r.band.konus_low }, { title: "band high", get: (r) => r.band.konus_high },
          { title: "this model", get: (r) => r.konus, model: true }, { title: "models counted", get: (r) => r.band.models, digits: 0 },
          { title: "inside?", get: (r) => (r.band.konus_inside === null ? "" : r.band.konus_inside ? "yes" : "NO") }] }) },
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
          { id: "fitted-laspeyres-bias", label: "Laspeyres bias, index points", value: lasp && lasp.bias_points ? lasp.bias_points.estimate : a.comparison.laspeyres_gap_points, digits: 3,
            withheld: !a.comparison.validity.regular },
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

  // ---- uprating clauses: what each index, and the Konüs index, would pay --------------------
  const clauseOf = (a, k) => a.clauses[k ?? 0];
  const indexTitle = (i) => (i === "konus" ? "Konüs" : (window.dualcost.state.catalogue.formulas.find((f) => f.formula === i) || {}).title || i);
  const konusStyle = (i) => (i === "konus" ? { backgroundColor: "#000", borderColor: "#000", colour: "#000", borderWidth: 3 } : {});
  const clauseChoice = { label: "Clause", options: (a) => a.clauses.map((c, k) => [k, c.clause.name || c.definition]) };
  const applied = (u, i) => num((u.by_index.find((x) => x.index === i) || {}).applied_percent);
  const lastUprating = (a) => clauseOf(a).upratings[clauseOf(a).upratings.length - 1];
  const moneyOf = (a, i) => (clauseOf(a).money || []).find((m) => m.index === i);
  // The index the cards set beside the Konüs index: Laspeyres where computed, else the first.
  const published = (a) => (a.indices.includes("laspeyres") ? "laspeyres" : a.indices.find((i) => i !== "konus"));
  const uprating = {
    id: "uprating",
    title: "Uprating clauses",
    intro: "An uprating clause (the measure, rounding, floor, cap and lag) run under each formula index and the "
      + "Konüs index of a series: each uprating, and what an amount paid under each would come to.",
    path: "/v1/uprating",
    operationId: "uprating",
    csv: { columns: "period,item,price[,quantity]", required: ["period", "item", "price"], read: readPanel },
    note: "A panel file replaces the prices and quantities and keeps the clauses.",
    fields: [
      modelField(undefined, panelShares),
      { kind: "formulas", pointer: "/formulas", label: "Formulas", scope: "series" },
      { pointer: "/amount", label: "Amount paid each period before uprating", kind: "number", optional: true },
      { pointer: "/series_kind", label: "Series the clauses read", kind: "select", optional: true,
        options: [["fixed_base", "fixed base"], ["chained", "chained"]] },
      { pointer: "/konus_standard", label: "Konüs living standard", kind: "select", optional: true,
        options: [["base", "base"], ["current", "current"], ["midpoint", "midpoint"]] },
      { pointer: "/base_period", label: "Base period", kind: "select", optional: true,
        options: (_, body) => (body.periods || []).map((p) => [p, p]) },
    ],
    grids: [
      { title: "Clauses", rows: { pointer: "/clauses", title: "clause", label: (c, r) => c.name || `clause ${r + 1}` },
        hint: "Measure: twelve_month (month or quarter of the year read), annual_average, or cumulative since a period. "
          + "Floor and cap in percent, after rounding; lag in periods from the measure to the first payment.",
        add: { text: "Add a clause", row: () => ({ measure: "twelve_month", period_of_year: 9, lag: 7 }) },
        columns: [{ title: "name", pointer: "/clauses/{r}/name", kind: "text", keep: true },
          { title: "measure", pointer: "/clauses/{r}/measure", kind: "select", options: ["twelve_month", "annual_average", "cumulative"], keep: true },
          { title: "month/quarter", pointer: "/clauses/{r}/period_of_year", keep: true },
          { title: "since", pointer: "/clauses/{r}/since", kind: "text", keep: true },
          { title: "decimals", pointer: "/clauses/{r}/rounding/decimals" },
          { title: "rounding", pointer: "/clauses/{r}/rounding/method", kind: "select", options: ["half_up", "half_even", "down", "up"] },
          { title: "floor %", pointer: "/clauses/{r}/floor", keep: true },
          { title: "cap %", pointer: "/clauses/{r}/cap", keep: true },
          { title: "lag", pointer: "/clauses/{r}/lag", keep: true }] },
      ...panelGrids,
    ],
    results: [
      { kind: "warning", id: "uprating-caution", text: (a) => `Caution. ${a.caution}` },
      { kind: "cards", cards: (a) => {
        const u = lastUprating(a);
        const i = published(a);
        const money = moneyOf(a, i);
        return [
          { id: "up-konus-applied", label: `Konüs uprating, %, paid from ${u ? u.paid_from : "-"} (${clauseOf(a).clause.name || "clause 1"})`, value: u ? applied(u, "konus") : null, digits: 2 },
          { id: "up-index-applied", label: `${indexTitle(i)} uprating, %`, value: u ? applied(u, i) : null, digits: 2 },
          { id: "up-index-difference", label: `paid under ${indexTitle(i)} minus under Konüs, whole series`, value: money ? money.difference_vs_konus_total : null, digits: 2 },
        ];
      } },
      { kind: "chart", id: "uprating-chart", title: "Each uprating under each index (percent applied, after rounding, floor and cap)",
        choose: clauseChoice, notices: ["reference_period_assumed", "series_kind_assumed", "konus_standard_assumed"],
        height: (a) => 110 + Math.max(...a.clauses.map((c) => c.upratings.length)) * a.indices.length * 18,
        text: (a, k) => { const c = clauseOf(a, k); return `${c.definition}${c.not_computed.map((n) => ` Not computed in ${n.measured_in}: ${n.reason}.`).join("")}`; },
        chart: (a, k) => C.barConfig({ labels: clauseOf(a, k).upratings.map((u) => [`measured ${u.measured_in}`, `paid from ${u.paid_from}`]),
          datasets: a.indices.map((i) => ({ label: indexTitle(i), data: clauseOf(a, k).upratings.map((u) => applied(u, i)), ...konusStyle(i) })),
          xTitle: "uprating", yTitle: "uprating applied, percent" }),
        table: (a, k) => ({ rows: clauseOf(a, k).upratings.flatMap((u) => u.by_index.map((b) => ({ u, b }))), columns: [
          { title: "paid from", get: (r) => r.u.paid_from }, { title: "index", get: (r) => indexTitle(r.b.index) },
          { title: "change %", get: (r) => r.b.change_percent, digits: 3 }, { title: "applied %", get: (r) => r.b.applied_percent, digits: 2 },
          { title: "factor", get: (r) => r.b.factor, digits: 4, model: true }] }) },
      { kind: "chart", id: "money-chart", title: "Money paid: running total under each index minus under the Konüs index",
        when: (a) => a.amount !== null, choose: clauseChoice,
        chart: (a, k) => C.lineConfig({ labels: a.periods, xTitle: "period", zeroAt: 0, yTitle: "cumulative difference, money (0 = as Konüs)",
          datasets: (clauseOf(a, k).money || []).filter((m) => m.index !== "konus").map((m) => ({ label: indexTitle(m.index), data: m.cumulative_difference_vs_konus })) }),
        table: (a, k) => ({ rows: clauseOf(a, k).money || [], columns: [{ title: "index", get: (m) => indexTitle(m.index) },
          { title: "total paid", get: (m) => m.total, digits: 2 }, { title: "minus Konüs", get: (m) => m.difference_vs_konus_total, digits: 2 },
          ...clauseOf(a, k).money[0].by_year.map((y, j) => ({ title: String(y.year), get: (m) => m.by_year[j].paid, digits: 2 }))] }) },
    ],
  };

  // ---- the index as built: a classification tree beside the nested CES Konüs index ---------
  const nodeAt = (a, t) => a.nodes.map((n) => ({ key: n.path, parent: n.parent === null ? null : n.path.slice(0, n.path.lastIndexOf(" > ")),
    depth: n.depth, label: n.name, n, t }));
  const lastT = (a) => a.periods.length - 1;
  // The request's tree (nested, or a flat list naming parents) as rows, each with its pointer.
  const treeNodes = (body) => {
    if (Array.isArray(body.tree)) return body.tree.map((node, k) => ({ node, at: `/tree/${k}`, depth: node.parent ? 1 : 0 }));
    const walk = (node, at, depth) => [{ node, at, depth }, ...(node.children || []).flatMap((c, k) => walk(c, `${at}/children/${k}`, depth + 1))];
    return body.tree ? walk(body.tree, "/tree", 0) : [];
  };
  const indexTree = {
    id: "index-tree",
    title: "Index as built",
    intro: "The index as a statistical office builds it: elementary aggregates over price quotes, upper levels by "
      + "Lowe or Young, chain-linked; beside it the Konüs index of a nested CES model on the same tree, and the bias at every node.",
    path: "/v1/index-tree",
    operationId: "indexTree",
    csv: { columns: "quote,aggregate,period,price", required: ["quote", "aggregate", "period", "price"],
      read(records, body, n) {
        const periods = [...new Set(records.map((r) => r.period.text))];
        const quotes = [];
        for (const r of records) {
          let q = quotes.find((x) => x.id === r.quote.text);
          if (!q) { q = { id: r.quote.text, aggregate: r.aggregate.text, prices: periods.map(() => null) }; quotes.push(q); }
          const t = periods.indexOf(r.period.text);
          q.prices[t] = r.price.text === "" ? null : n(r.price, `/quotes/${quotes.indexOf(q)}/prices/${t}`);
        }
        return Object.assign(body, { periods, quotes });
      } },
    note: "A quotes file replaces the periods and quotes and keeps the tree, the links and their weights (edit those in the weights grid or the request JSON).",
    fields: [
      { pointer: "/elementary_formula", label: "Elementary aggregates", kind: "select", optional: true,
        options: [["jevons", "Jevons"], ["carli", "Carli"], ["dutot", "Dutot"]] },
      { pointer: "/upper_formula", label: "Upper levels", kind: "select", optional: true, options: [["lowe", "Lowe"], ["young", "Young"]] },
      { pointer: "/sigma_by_level", label: "σ by level (root first), for nodes without their own", kind: "numbers", optional: true },
      { pointer: "/sigma_fit", label: "Fit σ from the links' weights", kind: "select", optional: true,
        options: [["by_group", "by group"], ["by_level", "by level"]], hint: "Empty: the σ given. Fitted, the given σ serve as fallbacks." },
      { pointer: "/sigma_fallback", label: "σ where no fit is possible", kind: "number", optional: true },
    ],
    grids: [
      { title: "Classification: σ and elementary formula by node", rows: { title: "node", list: treeNodes,
        key: (n) => n.at, label: (n) => `${"· ".repeat(n.depth)}${n.node.name}` },
        hint: "Groups and subgroups as in the request JSON below (its 'tree'); σ empty: the level's σ above; formula empty: the elementary formula above.",
        columns: [{ title: "σ", pointer: (n) => `${n.at}/sigma`, keep: true },
          { title: "formula", pointer: (n) => `${n.at}/formula`, kind: "select", options: ["jevons", "carli", "dutot"], keep: true }] },
      { title: "Quote prices by period", rows: { pointer: "/quotes", title: "quote" },
        columnsFrom: { pointer: "/periods", cell: "/quotes/{r}/prices/{c}" }, hint: "An empty cell: not priced that period." },
      { title: "Weights by link", rows: { pointer: "/links", title: "link", label: (l) => l.period },
        columnsFrom: { list: (b) => [...new Set((b.links || []).flatMap((l) => Object.keys(l.weights || {})))], cell: "/links/{r}/weights/{col}" } },
    ],
    results: [
      { kind: "cards", cards: (a) => {
        const root = a.nodes[0];
        const t = lastT(a);
        return [
          { id: "tree-index-last", label: `${root.name}, ${a.periods[t]} (index as built)`, value: root.index[t], digits: 3 },
          { id: "tree-konus-last", label: "Konüs index, nested CES", value: root.konus ? root.konus[t] : null, digits: 3 },
          { id: "tree-bias-last", label: "bias, index points", value: root.bias_points ? root.bias_points[t] : null, digits: 3 }];
      } },
      { kind: "tree", id: "tree-table", title: (a) => `The tree in ${a.periods[lastT(a)]} (${a.scale.indices})`, nodeTitle: "node",
        nodes: (a) => nodeAt(a, lastT(a)), notices: ["quotes_not_priced"], columns: [
          { title: "index", get: (x) => x.n.index[x.t], digits: 3 }, { title: "Konüs", get: (x) => (x.n.konus ? x.n.konus[x.t] : null), digits: 3, model: true },
          { title: "bias (points)", get: (x) => (x.n.bias_points ? x.n.bias_points[x.t] : null), digits: 3, model: true },
          { title: "weight", get: (x) => x.n.weights_used[x.n.weights_used.length - 1], digits: 4 },
          { title: "formula", get: (x) => x.n.formula }, { title: "σ", get: (x) => x.n.sigma, digits: 2 }, { title: "quotes", get: (x) => (x.n.quotes || "") }] },
      { kind: "chart", id: "tree-bias-chart", title: "Bias at each node (index points, index as built minus Konüs)",
        choose: { label: "Period", options: (a) => a.periods.map((p, t) => [t, p]), initial: lastT },
        height: (a) => 80 + a.nodes.length * 26,
        chart: (a, t) => C.barConfig({ labels: a.nodes.map((n) => `${"· ".repeat(n.depth)}${n.name}`),
          datasets: [{ label: `bias, index points, ${a.periods[t]}`, data: a.nodes.map((n) => (n.bias_points ? n.bias_points[t] : null)) }],
          xTitle: "node", yTitle: "bias, index points (0 = no bias)" }) },
      { kind: "chart", id: "tree-node-chart", title: "A node over time: the index as built and the Konüs index",
        choose: { label: "Node", options: (a) => a.nodes.map((n, k) => [k, `${"· ".repeat(n.depth)}${n.name}`]) },
        chart: (a, k) => C.lineConfig({ labels: a.periods, xTitle: "period", yTitle: `index (${a.scale.indices})`, datasets: [
          { label: `${a.nodes[k].name}: index as built (${a.nodes[k].formula})`, data: a.nodes[k].index },
          ...(a.nodes[k].konus ? [{ label: "Konüs index, nested CES", colour: "#000", borderWidth: 3, data: a.nodes[k].konus }] : [])] }),
        table: (a, k) => ({ rows: a.periods.map((p, t) => ({ p, t })), columns: [{ title: "period", get: (r) => r.p },
          { title: "index", get: (r) => a.nodes[k].index[r.t], digits: 3 }, { title: "Konüs", get: (r) => (a.nodes[k].konus || [])[r.t], digits: 3, model: true },
          { title: "bias (points)", get: (r) => (a.nodes[k].bias_points || [])[r.t], digits: 3, model: true }] }) },
      { kind: "chart", id: "tree-sigma-chart", title: "Fitted σ by group, with ±2 standard errors", when: (a) => a.sigma_fit,
        notices: ["sigma_fitted_over_given", "sigma_not_fitted", "sigma_exact_fit"], height: (a) => 80 + a.sigma_fit.estimates.length * 30,
        text: (a) => `${a.sigma_fit.equation}. Groups not fitted take the σ in the last column.`,
        chart: (a) => { const e = a.sigma_fit.estimates; return C.barConfig({ labels: e.map((x) => x.nodes.join(", ")), xTitle: "group", yTitle: "σ (elasticity of substitution)",
          datasets: [{ label: "estimate ± 2 s.e.", order: 2, data: e.map((x) => (x.sigma === null || x.standard_error === null ? null : [x.sigma - 2 * x.standard_error, x.sigma + 2 * x.standard_error])) },
            { type: "line", indexAxis: "y", showLine: false, label: "σ the model uses", order: 1, pointStyle: "rectRot", pointRadius: 6,
              borderColor: "#000", backgroundColor: "#000", data: e.map((x) => x.used[0]) }] }); },
        table: (a) => ({ rows: a.sigma_fit.estimates, columns: [{ title: "group", get: (x) => x.nodes.join(", ") },
          { title: "σ fitted", get: (x) => x.sigma, digits: 3 }, { title: "s.e.", get: (x) => x.standard_error, digits: 3 },
          { title: "obs.", get: (x) => x.observations, digits: 0 }, { title: "used", get: (x) => x.used[0], digits: 3 },
          { title: "why not fitted", get: (x) => x.reason || "" }] }) },
      { kind: "text", title: "Links", text: (a) => a.links.map((l) => `Linked in ${l.period} (weights of ${l.weight_reference[0]}`
        + `${l.weight_reference.length > 1 ? ` to ${l.weight_reference[l.weight_reference.length - 1]}` : ""}): ${l.periods[0]} to ${l.periods[l.periods.length - 1]}.`).join(" ") },
    ],
  };

  // ---- uprating on a node of the index tree: the tree's fields, the clauses, the uprating's answer
  const treeUprating = {
    id: "tree-uprating",
    title: "Uprating on the tree",
    intro: "Uprating clauses read on any node of an index tree: what the index as built, and the nested CES Konüs "
      + "index on the same tree, would pay.",
    path: "/v1/uprating/index-tree",
    operationId: "upratingFromIndexTree",
    csv: indexTree.csv,
    note: indexTree.note,
    fields: [
      { pointer: "/node", label: "Node whose index the clauses read", kind: "select",
        options: (_, body) => treeNodes(body).map((n) => [n.node.name, `${"· ".repeat(n.depth)}${n.node.name}`]) },
      { pointer: "/amount", label: "Amount paid each period before uprating", kind: "number", optional: true },
      ...indexTree.fields,
    ],
    grids: [uprating.grids[0], ...indexTree.grids],
    results: uprating.results,
  };

  // ---- revealed preference: what the choices alone say ---------------------------------------
  const verdict = (ok) => (ok ? "passes" : "FAILS");
  const revealed = {
    id: "revealed",
    title: "Revealed preference",
    intro: "From observed prices and quantities alone, without a model: whether one utility function can explain "
      + "the choices (GARP, WARP, SARP), every violation, Afriat's efficiency index, and the bracket on the Konüs index each period.",
    path: "/v1/revealed-preference",
    operationId: "revealedPreference",
    csv: { columns: "period,item,price,quantity", required: ["period", "item", "price", "quantity"],
      read(records, body, n) {
        readPanel(records, body, n);
        if (!body.periods.includes(body.utility_period)) delete body.utility_period;
        return body;
      } },
    fields: [
      { pointer: "/base_period", label: "Base period", kind: "select", optional: true,
        options: (_, body) => (body.periods || []).map((p) => [p, p]) },
      { pointer: "/utility_period", label: "Living standard of period", kind: "select", optional: true,
        options: (_, body) => (body.periods || []).map((p) => [p, p]) },
    ],
    grids: panelGrids,
    results: [
      { kind: "cards", cards: (a) => [
        { id: "rp-garp", label: "GARP", value: verdict(a.consistency.garp) },
        { id: "rp-warp", label: "WARP", value: verdict(a.consistency.warp) },
        { id: "rp-sarp", label: "SARP", value: verdict(a.consistency.sarp) },
        { id: "rp-efficiency", label: "Afriat's efficiency index (1: consistent)", value: a.consistency.efficiency_index },
        { id: "rp-level", label: "bounds computed at efficiency", value: a.bounds.efficiency_level }] },
      { kind: "chart", id: "rp-bounds-chart", notices: ["garp_failed", "varian_bounds_only"],
        title: (a) => `Bracket on the Konüs index from ${a.bounds.base_period}, at the living standard of ${a.bounds.utility_period}`,
        chart: (a) => boundsChart(a.bounds.rows, a.bounds.base_period) },
      { kind: "table", id: "rp-bounds-table", title: "Bounds by period (ratios to the base period)", rows: (a) => a.bounds.rows, columns: boundsColumns },
      { kind: "table", id: "rp-violations", title: "Violations, with the cycle of periods revealing each",
        when: (a) => a.consistency.violations.length, rows: (a) => a.consistency.violations, columns: [
          { title: "axiom", get: (v) => v.axiom }, { title: "first", get: (v) => v.first }, { title: "second", get: (v) => v.second },
          { title: "cycle", get: (v) => v.periods.join(" → ") }] },
      { kind: "text", when: (a) => !a.consistency.violations.length, text: () => "No violation of GARP, WARP or SARP: the choices are consistent with one utility function." },
      { kind: "text", title: "Method", text: (a) => a.bounds.method },
    ],
  };

  // ---- sensitivity: the Konüs index and each bias along a grid and across models -------------
  const gridRows = (a) => a.grid.points.map((p) => ({ label: String(p.value), x: p.value, ok: true, answer: window.dualcost.asComparison(p) }));
  const modelLabel = (p, k) => `${k + 1}: ${p.family}${p.model_parameters && typeof p.model_parameters.sigma === "number" ? ` σ ${p.model_parameters.sigma}` : ""}`;
  // The band's bias measures of the weighted formulas (the registry says which).
  const bandBias = (a) => {
    const keep = new Set(weighted(a.models[0]).map((f) => `${f.formula}_bias_points`));
    return a.band.filter((r) => keep.has(r.measure));
  };
  const sensitivity = {
    id: "sensitivity",
    title: "Sensitivity",
    intro: "One basket compared under a set of models and along a grid of one model's parameter: how far the Konüs "
      + "index and each formula's bias depend on the model chosen.",
    path: "/v1/sensitivity",
    operationId: "sensitivity",
    csv: { ...basketCsv, read: readBasket },
    note: "A basket file keeps the models: their parameters keyed by item must name the file's items.",
    fields: [
      { pointer: "/models", label: "Models compared (JSON list: family and parameters, as in a comparison's model)", kind: "json", rows: 4 },
      { pointer: "/grid/model", label: "Grid: model number (0 = first)", kind: "number", optional: true, prune: true },
      { pointer: "/grid/parameter", label: "Grid: parameter (sigma, frisch, gamma_scale)", kind: "text", optional: true, prune: true },
      { pointer: "/grid/group", label: "Grid: nested CES group", kind: "text", optional: true, prune: true },
      { pointer: "/grid/values", label: "Grid: values (separated by commas)", kind: "numbers", optional: true, prune: true },
      { kind: "formulas", pointer: "/formulas", label: "Formulas", scope: "comparison" },
      { pointer: "/base/expenditure", label: "Base income m0 (with shares)", kind: "number", optional: true },
    ],
    grids: [basketGrid],
    validity: (a) => {
      const bad = [...a.models, ...(a.grid ? a.grid.points : [])].filter((p) => !p.validity.regular);
      return bad.length ? { title: "Some models or grid points are outside their regular region: their Konüs figures are not results and are left out of the ranges.",
        reasons: bad.map((p) => `${p.family}${p.value === null ? "" : ` at ${p.value}`}: ${p.validity.reasons.map((r) => r.message).join("; ")}`) } : null;
    },
    results: [
      { kind: "cards", cards: (a) => [
        { id: "sens-band-low", label: "Konüs index (base standard) across the models: lowest", value: bandOf(a.band, "konus_base").low },
        { id: "sens-band-high", label: "highest", value: bandOf(a.band, "konus_base").high },
        ...(a.grid ? [{ id: "sens-grid-low", label: `along the grid of ${a.grid.parameter}${a.grid.group ? ` (${a.grid.group})` : ""}: lowest`, value: bandOf(a.grid.range, "konus_base").low },
          { id: "sens-grid-high", label: "highest", value: bandOf(a.grid.range, "konus_base").high }] : [])] },
      { kind: "chart", id: "sens-grid-chart", when: (a) => a.grid,
        title: (a) => `Along the grid: ${a.grid.family} ${a.grid.parameter}${a.grid.group ? ` of '${a.grid.group}'` : ""}`,
        chart: (a) => sweepChart(gridRows(a), `${a.grid.parameter}${a.grid.group ? ` of ${a.grid.group}` : ""}`),
        table: (a) => ({ rows: a.grid.points, columns: [{ title: a.grid.parameter, get: (p) => String(p.value) },
          { title: "Konüs (base)", get: (p) => p.konus.base, model: true },
          ...a.grid.points[0].formulas.slice(0, 6).map((f) => ({ title: `${f.title} bias`, digits: 3, model: true,
            get: (p) => (p.formulas.find((x) => x.formula === f.formula) || {}).bias_points }))] }) },
      { kind: "chart", id: "sens-band-chart", title: "The band across the models: each formula's bias, lowest to highest (index points)",
        height: (a) => 90 + bandBias(a).length * 30,
        text: (a) => (bandBias(a).length < a.band.filter((r) => r.measure.endsWith("_bias_points")).length
          ? "Unweighted formulas (Carli, Jevons, Dutot) are in the ranges table below: their gaps, of another order, would flatten this chart." : ""),
        chart: (a) => {
          const rows = bandBias(a);
          return C.barConfig({ labels: rows.map((r) => titleOf(a.models[0], r.measure.replace(/_bias_points$/, ""))),
            datasets: [{ label: `bias across ${a.models.length} models, lowest to highest`, data: rows.map((r) => (r.low === null ? null : [r.low, r.high])) },
              ...a.models.map((m, k) => ({ type: "line", indexAxis: "y", showLine: false, label: modelLabel(m, k), pointRadius: 5,
                pointStyle: ["circle", "rectRot", "triangle", "rect"][k % 4], borderColor: "#000", backgroundColor: C.PALETTE[(k + 1) % 8],
                data: rows.map((r) => num((m.formulas.find((f) => `${f.formula}_bias_points` === r.measure) || {}).bias_points)) }))],
            xTitle: "formula", yTitle: "bias, index points on base 100 (0 = no bias)" });
        } },
      { kind: "table", id: "sens-models", title: "Each model of the set", rows: (a) => a.models.map((m, k) => ({ m, k })), columns: [
        { title: "model", get: (r) => modelLabel(r.m, r.k) }, { title: "Konüs (base)", get: (r) => r.m.konus.base, model: true },
        { title: "Laspeyres bias (points)", get: (r) => window.dualcost.asComparison(r.m).laspeyres_gap_points, digits: 3, model: true },
        { title: "regular", get: (r) => (r.m.validity.regular ? "yes" : "NO") }] },
      { kind: "table", id: "sens-band", title: "Ranges across the models", rows: (a) => a.band, columns: [
        { title: "measure", get: (r) => r.measure }, { title: "low", get: (r) => r.low }, { title: "high", get: (r) => r.high },
        { title: "models", get: (r) => r.count, digits: 0 }, { title: "left out", get: (r) => r.left_out, digits: 0 }] },
    ],
  };

  // ---- several families fitted to the same budgets: the band across them, each with its interval
  const famName = (a, k) => a.families[k].comparison.family;
  const fittedFamilies = {
    id: "fitted-families",
    title: "Fitted families",
    intro: "Several preference families fitted to the same budget data, each then comparing the same two price situations: "
      + "the band across the families beside each family's interval from its estimate's uncertainty.",
    path: "/v1/fitted-sensitivity",
    operationId: "fittedSensitivity",
    action: "Fit and compare",
    csv: fits.csv,
    fields: [
      { pointer: "/families", label: "Families fitted (JSON list: family and its fit options)", kind: "json", rows: 2 },
      { pointer: "/comparison/base/expenditure", label: "Base income for the comparison", kind: "number", optional: true },
      { pointer: "/uncertainty/draws", label: "Draws for the intervals", kind: "number", optional: true },
    ],
    grids: fitted.grids,
    results: [
      { kind: "cards", cards: (a) => [
        { id: "ff-konus-low", label: `Konüs index (base standard) across ${a.families.length} fitted families: lowest`, value: bandOf(a.band, "konus_base").low },
        { id: "ff-konus-high", label: "highest", value: bandOf(a.band, "konus_base").high },
        { id: "ff-laspeyres-low", label: "Laspeyres bias across them, index points: lowest", value: bandOf(a.band, "laspeyres_bias_points").low, digits: 3 },
        { id: "ff-laspeyres-high", label: "highest", value: bandOf(a.band, "laspeyres_bias_points").high, digits: 3 }] },
      { kind: "chart", id: "ff-band-chart", title: "Each family's interval and the band across the families",
        choose: { label: "Measure", options: (a) => a.band.map((r) => [r.measure, r.measure.replace(/_bias_points$/, " bias, index points").replace(/^konus_/, "Konüs index, ")]) },
        height: (a) => 110 + a.families.length * 40,
        chart: (a, m) => {
          const r = bandOf(a.band, m);
          return loose(C.barConfig({ labels: [...a.families.map((_, k) => famName(a, k)), "band across the families"],
            xTitle: "family", yTitle: m.endsWith("_bias_points") ? "bias, index points on base 100" : "Konüs index (ratio, 1 = no change)", zeroAt: m.endsWith("_bias_points") ? 0 : null,
            datasets: [{ label: `${Math.round(100 * a.families[0].intervals.confidence_level)}% interval; the band: lowest to highest estimate`, order: 2,
              data: [...r.intervals.map((i) => (i.low === null ? null : [i.low, i.high])), [r.low, r.high]],
              backgroundColor: [...r.intervals.map(() => C.PALETTE[0]), "rgba(0,0,0,0.3)"] },
            { type: "line", indexAxis: "y", showLine: false, label: "estimate", order: 1, pointStyle: "rectRot", pointRadius: 6,
              borderColor: "#000", backgroundColor: "#000", data: [...r.intervals.map((i) => i.estimate), null] }] }));
        },
        table: (a, m) => ({ rows: bandOf(a.band, m).intervals, columns: [{ title: "family", get: (i) => famName(a, i.family) },
          { title: "estimate", get: (i) => i.estimate, model: true }, { title: "low", get: (i) => i.low }, { title: "high", get: (i) => i.high }] }) },
      { kind: "table", id: "ff-families", title: "Each family's fit", rows: (a) => a.families, columns: [
        { title: "family", get: (f) => f.comparison.family }, { title: "observations", get: (f) => f.fit.fit.observations, digits: 0 },
        { title: "converged", get: (f) => (f.fit.fit.converged ? "yes" : "NO") },
        { title: "Konüs (base)", get: (f) => f.comparison.konus.base, model: true },
        { title: "Laspeyres bias (points)", get: (f) => f.comparison.laspeyres_gap_points, digits: 3, model: true },
        { title: "draws failed", get: (f) => f.intervals.draws_failed, digits: 0 }] },
    ],
  };

  window.dualcostViews = [comparison, series, uprating, indexTree, treeUprating, households, fits, fitted, fittedFamilies, revealed, sensitivity, audits];
  window.dualcost.boot(window.dualcostViews).catch((e) => {
    const box = document.getElementById("error");
    box.textContent = String(e);
    box.hidden = false;
  });
})();
