// sounding page, "Over time" panel: a metric per month or week, for the whole history and for
// topics, with the trend of the median in plain words, from POST /v1/trends.
"use strict";

(() => {
  const S = window.Sounding;
  const $ = S.$;
  let busy = false;

  function renderSeries(s, r) {
    const box = S.node("section", { class: "card t-series" });
    box.append(S.node("h3", {}, s.name));
    box.append(S.node("p", { class: "summary t-reading" },
      s.trend ? `Last ${r.last} ${r.by}s: ${s.trend.reading}.` : "Too few periods for a trend."));
    const { table, body } = S.table("contrib t-table",
      [r.by === "month" ? "Month" : "Week", "Posts", "Share", "Median", "95% interval"]);
    for (const row of s.rows) {
      const tr = S.node("tr", row.few_posts ? { class: "seg-small" } : {});
      tr.append(S.node("th", { scope: "row" }, row.period + (row.few_posts && row.n ? " (few posts)" : "")));
      tr.append(S.node("td", { class: "num" }, String(row.n)));
      tr.append(S.node("td", { class: "num" }, `${Math.round(100 * row.share)}%`));
      tr.append(S.node("td", { class: "num" }, S.fmt(row.median, r.metric)));
      tr.append(S.node("td", { class: "num" }, S.range(row.ci_low, row.ci_high, r.metric)));
      body.append(tr);
    }
    box.append(table);
    return box;
  }

  async function run(ev) {
    ev.preventDefault();
    if (busy) return;
    const err = $("t-error");
    S.clearError(err);
    const topics = $("t-topics").value.split("\n").map((t) => t.trim()).filter(Boolean);
    const body = { by: $("t-by").value, topics, metric: $("t-metric").value };
    if ($("t-account").value) body.account = $("t-account").value;
    busy = true;
    $("t-submit").textContent = "Working…";
    $("trends-panel").setAttribute("aria-busy", "true");
    try {
      const r = await S.api("/v1/trends", body);
      $("t-series").replaceChildren(...r.series.map((s) => renderSeries(s, r)));
      $("t-notes").replaceChildren(...r.warnings.concat([r.note]).map((n) => S.node("li", {}, n)));
      $("t-output").hidden = false;
      const blob = await S.apiBlob("/v1/trends", { ...body, format: "svg" });
      S.showPlot($("t-plot"), blob,
        `Median ${S.metricLabel(r.metric)} per ${r.by} with its interval, one line per series`);
    } catch (e) {
      $("t-output").hidden = true;
      S.showError(err, e.message);
    } finally {
      busy = false;
      $("t-submit").textContent = "Show over time";
      $("trends-panel").setAttribute("aria-busy", "false");
    }
  }

  document.addEventListener("DOMContentLoaded", () => {
    $("t-form").addEventListener("submit", run);
    S.fillAccounts($("t-account"), { anyLabel: "every account" })
      .catch((e) => S.showError($("t-error"), e.message));
  });
})();
