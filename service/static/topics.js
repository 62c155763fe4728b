// sounding page, "Topics we have" panel: the topics found in the history (GET /v1/topics) and
// the map of the posts (GET /v1/map), coloured by the metric on a log scale, text on hover.
"use strict";

(() => {
  const S = window.Sounding;
  const $ = S.$;
  let busy = false;

  function query() {
    const q = new URLSearchParams({ metric: $("f-metric").value });
    if ($("f-account").value) q.set("account", $("f-account").value);
    return q.toString();
  }

  // Dark teal (low) to amber (high) on log10(value + 1).
  function colour(v, lo, hi) {
    const t = hi > lo ? (Math.log10(v + 1) - lo) / (hi - lo) : 0.5;
    const mix = (a, b) => Math.round(a + (b - a) * Math.min(Math.max(t, 0), 1));
    return `rgb(${mix(31, 208)},${mix(111, 140)},${mix(120, 44)})`;
  }

  function drawMap(m) {
    const W = 640, H = 460, pad = 16;
    const xs = m.points.map((p) => p.x), ys = m.points.map((p) => p.y);
    const x0 = Math.min(...xs), x1 = Math.max(...xs), y0 = Math.min(...ys), y1 = Math.max(...ys);
    const sx = (x) => pad + ((x - x0) / ((x1 - x0) || 1)) * (W - 2 * pad);
    const sy = (y) => H - pad - ((y - y0) / ((y1 - y0) || 1)) * (H - 2 * pad);
    const logs = m.points.map((p) => Math.log10(p.value + 1));
    const lo = Math.min(...logs), hi = Math.max(...logs);
    const svg = S.svg("svg", { viewBox: `0 0 ${W} ${H}`, class: "f-map", role: "img",
      "aria-label": `Map of ${m.points.length} posts by meaning, coloured by ${S.metricLabel(m.metric)}` });
    for (const p of m.points) {
      const c = S.svg("circle", { cx: sx(p.x).toFixed(1), cy: sy(p.y).toFixed(1), r: 3,
        fill: colour(p.value, lo, hi), "fill-opacity": 0.8, class: "f-point", "data-post": p.post_id });
      c.append(S.svg("title", {}, `${p.text} (${S.fmt(p.value, m.metric)})`));
      c.addEventListener("mouseenter", () => {
        $("f-hover").textContent = `${p.topic} · ${S.fmt(p.value, m.metric)} ${S.metricLabel(m.metric)}: ${p.text}`;
      });
      svg.append(c);
    }
    for (const [name, [cx, cy]] of Object.entries(m.centres)) {
      svg.append(S.svg("text", { x: sx(cx).toFixed(1), y: sy(cy).toFixed(1), class: "f-centre",
        "text-anchor": "middle", "font-weight": "bold", "font-size": 13 }, name));
    }
    $("f-map").replaceChildren(svg);
    const held = Math.round(100 * m.explained.reduce((a, b) => a + b, 0));
    $("f-map-note").textContent = `${m.projection}; the two axes hold ${held}% of the variance. ${m.note}`;
  }

  async function run(ev) {
    ev.preventDefault();
    if (busy) return;
    const err = $("f-error");
    S.clearError(err);
    busy = true;
    $("f-submit").textContent = "Working…";
    $("found-panel").setAttribute("aria-busy", "true");
    try {
      const r = await S.api("/v1/topics?" + query());
      $("f-criterion").textContent = `${r.k} topics: ${r.criterion}.`;
      $("f-body").replaceChildren(...r.topics.map((t) => {
        const tr = S.node("tr", t.too_small ? { class: "seg-small" } : {});
        tr.append(S.node("th", { scope: "row" }, t.name));
        tr.append(S.node("td", { class: "num" }, String(t.n)));
        tr.append(S.node("td", { class: "num" }, `${Math.round(100 * t.share)}%`));
        tr.append(S.node("td", { class: "num" }, S.fmt(t.median, r.metric)));
        tr.append(S.node("td", {}, t.summary));
        tr.append(S.node("td", {}, t.central.length ? t.central[0].text : "–"));
        return tr;
      }));
      $("f-note").textContent = r.note;
      $("f-output").hidden = false;
      drawMap(await S.api("/v1/map?" + query()));
    } catch (e) {
      $("f-output").hidden = true;
      S.showError(err, e.message);
    } finally {
      busy = false;
      $("f-submit").textContent = "Find the topics";
      $("found-panel").setAttribute("aria-busy", "false");
    }
  }

  document.addEventListener("DOMContentLoaded", () => {
    $("f-form").addEventListener("submit", run);
    S.fillAccounts($("f-account"), { anyLabel: "every account" })
      .catch((e) => S.showError($("f-error"), e.message));
  });
})();
