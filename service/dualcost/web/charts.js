// Chart builders on the vendored Chart.js (vendor/chart.umd.min.js, MIT; see its licence file).
// Every chart has titled axes with units, a legend, and the Okabe-Ito palette, which stays
// distinguishable under the common forms of colour blindness (Okabe and Ito 2008).
"use strict";

const PALETTE = ["#0072B2", "#E69F00", "#009E73", "#D55E00", "#CC79A7", "#56B4E9", "#F0E442",
  "#000000"];
const colour = (i) => PALETTE[i % PALETTE.length];
const DASHES = [[], [6, 3], [2, 2], [8, 3, 2, 3]];

// A zero (or other reference) line drawn by the grid itself: no plug-in needed.
function referenceGrid(at) {
  return {
    color: (ctx) => (ctx.tick && Math.abs(ctx.tick.value - at) < 1e-12 ? "#000" : "#e3e3e3"),
    lineWidth: (ctx) => (ctx.tick && Math.abs(ctx.tick.value - at) < 1e-12 ? 2 : 1),
  };
}

function axis(title, extra = {}) {
  return { title: { display: true, text: title, font: { size: 12 } },
    ticks: { font: { size: 11 } }, ...extra };
}

function baseOptions(xTitle, yTitle, { horizontal = false, zeroAt = null } = {}) {
  const value = axis(yTitle, zeroAt === null ? {} : { grid: referenceGrid(zeroAt) });
  const category = axis(xTitle, { ticks: { font: { size: 11 }, autoSkip: true, maxRotation: 60 } });
  return {
    responsive: true,
    maintainAspectRatio: false,
    animation: false,
    indexAxis: horizontal ? "y" : "x",
    plugins: { legend: { position: "bottom", labels: { boxWidth: 14, font: { size: 11 },
      filter: (item) => !item.text.endsWith("(low)") } },
      tooltip: { enabled: true } },
    scales: horizontal ? { x: value, y: category } : { x: category, y: value },
  };
}

// Bars per category (one colour per dataset); horizontal bars keep long labels legible on a phone.
function barConfig({ labels, datasets, xTitle, yTitle, horizontal = true, zeroAt = 0 }) {
  return {
    type: "bar",
    data: { labels, datasets: datasets.map((d, i) => ({ backgroundColor: colour(i),
      borderColor: colour(i), ...d })) },
    options: baseOptions(xTitle, yTitle, { horizontal, zeroAt }),
  };
}

// Lines over periods (or σ); a `band: [lowIndex, highIndex]` dataset pair fills between them.
function lineConfig({ labels, datasets, xTitle, yTitle, zeroAt = null, xLinear = false }) {
  const sets = datasets.map((d, i) => ({
    borderColor: d.colour || colour(i), backgroundColor: d.colour || colour(i),
    borderDash: DASHES[Math.floor(i / PALETTE.length) % DASHES.length], pointRadius: 2,
    borderWidth: 2, spanGaps: false, fill: false, ...d,
  }));
  const options = baseOptions(xTitle, yTitle, { zeroAt });
  if (xLinear) options.scales.x.type = "linear";
  return { type: "line", data: { labels, datasets: sets }, options };
}

// The Konüs band: the lowest and highest Konüs series (base, current, midpoint living standard)
// as a shaded area, drawn first so that the formula lines sit on top of it.
function bandDatasets(low, high, label) {
  return [
    { label: `${label} (low)`, data: low, borderColor: "rgba(0,0,0,0.35)", borderWidth: 1,
      pointRadius: 0, backgroundColor: "rgba(0,0,0,0.12)", fill: false, order: 10 },
    { label, data: high, borderColor: "rgba(0,0,0,0.35)", borderWidth: 1, pointRadius: 0,
      backgroundColor: "rgba(0,0,0,0.12)", fill: "-1", order: 10 },
  ];
}

// A histogram of values with equal bins (Freedman-Diaconis width, at least 5 bins, at most 30).
function histogram(values, weights) {
  const v = values.filter((x) => Number.isFinite(x)).sort((a, b) => a - b);
  if (v.length === 0) return { labels: [], counts: [] };
  const q = (p) => v[Math.min(v.length - 1, Math.floor(p * (v.length - 1)))];
  const iqr = q(0.75) - q(0.25);
  const span = v[v.length - 1] - v[0] || 1e-9;
  let bins = iqr > 0 ? Math.ceil(span / (2 * iqr / Math.cbrt(v.length))) : 5;
  bins = Math.max(5, Math.min(30, bins));
  const width = span / bins;
  const counts = new Array(bins).fill(0);
  values.forEach((x, i) => {
    if (!Number.isFinite(x)) return;
    const k = Math.min(bins - 1, Math.floor((x - v[0]) / width));
    counts[k] += weights ? weights[i] : 1;
  });
  const labels = counts.map((_, k) => (v[0] + (k + 0.5) * width).toFixed(4));
  return { labels, counts };
}

// Box plots as floating bars: the box from the first to the third quartile, whiskers to the
// 10th and 90th percentiles, a line at the median (Tukey 1977, with percentile whiskers).
function boxConfig({ labels, stats, xTitle, yTitle }) {
  return {
    type: "bar",
    data: {
      labels,
      datasets: [
        { label: "10th to 90th percentile", data: stats.map((s) => [s.p10, s.p90]),
          backgroundColor: "rgba(86,180,233,0.35)", borderColor: colour(5), borderWidth: 1,
          barPercentage: 0.15, grouped: false },
        { label: "quartiles (box)", data: stats.map((s) => [s.q1, s.q3]),
          backgroundColor: "rgba(0,114,178,0.55)", borderColor: colour(0), borderWidth: 1,
          barPercentage: 0.6, grouped: false },
        { label: "median", data: stats.map((s) => [s.median - s.tick, s.median + s.tick]),
          backgroundColor: "#000", barPercentage: 0.7, grouped: false },
      ],
    },
    options: (() => {
      const o = baseOptions(xTitle, yTitle, { horizontal: true });
      o.scales.x.beginAtZero = false;  // the spread, not the distance from zero, is the point
      return o;
    })(),
  };
}

function percentile(sorted, p) {
  if (sorted.length === 0) return NaN;
  const h = (sorted.length - 1) * p;
  const lo = Math.floor(h);
  return sorted[lo] + (h - lo) * ((sorted[Math.min(lo + 1, sorted.length - 1)]) - sorted[lo]);
}

function boxStats(values) {
  const v = values.filter((x) => Number.isFinite(x)).sort((a, b) => a - b);
  const s = { p10: percentile(v, 0.1), q1: percentile(v, 0.25), median: percentile(v, 0.5),
    q3: percentile(v, 0.75), p90: percentile(v, 0.9) };
  s.tick = Math.max((s.p90 - s.p10) / 200, 1e-6);
  return s;
}

function drawChart(canvas, config) {
  const old = window.Chart.getChart(canvas);
  if (old) old.destroy();
  return new window.Chart(canvas, config);
}

window.dualcostCharts = { PALETTE, colour, barConfig, lineConfig, bandDatasets, histogram,
  boxConfig, boxStats, drawChart };
