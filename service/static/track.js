// The page's track-record panel: how the forecasts given turned out.
"use strict";
(function () {
  const $ = (id) => document.getElementById(id);
  const pct = (v) => (v === null || v === undefined ? "–" : `${Math.round(v * 100)}%`);

  async function load() {
    const metric = $("metric") ? $("metric").value : "impressions";
    let rep;
    try {
      const resp = await fetch(`/v1/track-record?metric=${encodeURIComponent(metric)}`);
      if (!resp.ok) throw new Error(`HTTP ${resp.status}`);
      rep = await resp.json();
    } catch (e) {
      $("track-summary").textContent = `The track record is not available: ${e.message}`;
      return;
    }
    const o = rep.overall;
    $("track-summary").textContent =
      `${o.given} forecasts given, ${o.matched} matched to a published post, ${o.settled} settled.`;
    if (!o.settled) {
      $("track-figures").hidden = true;
      return;
    }
    const ci = o.live_coverage_ci;
    $("track-live").textContent =
      `${pct(o.live_coverage)} of ${o.settled} (95% sure: ${pct(ci[0])}–${pct(ci[1])}) ` +
      `of ${pct(o.stated_coverage)} intervals`;
    const b = o.baselines;
    // A typical miss: the forecast is off by this factor either way (exp of MAE on log1p).
    const f = (v) => (v === null ? "–" : "×" + Math.exp(v).toFixed(2));
    $("track-mae").textContent =
      `sounding ${f(o.mae_log)}; account median ${f(b.account_median.mae_log)}; ` +
      `precedents' median ${f(b.precedents_median.mae_log)}`;
    $("track-figures").hidden = false;
  }

  document.addEventListener("DOMContentLoaded", () => {
    load();
    if ($("metric")) $("metric").addEventListener("change", load);
    // Only "I'll post this" adds a forecast to the record: refresh after it.
    document.addEventListener("sounding:recorded", load);
  });
})();
