// sounding page, "Segments" panel: a metric split by topics named in plain words, or by timing
// and form, with the statistics and the figure the API gives.
"use strict";

(() => {
  const S = window.Sounding;
  const $ = S.$;
  let busy = false;

  function renderSplit(split, metric) {
    const box = S.node("section", { class: "card seg-split" });
    box.append(S.node("h3", {}, split.title));
    const { table, body } = S.table("contrib seg-table",
      ["Segment", "Posts", "Median", "Middle half of posts", "Median, 95% sure", "Reading"]);
    for (const s of split.segments) {
      const tr = S.node("tr", s.too_small ? { class: "seg-small" } : {});
      tr.append(S.node("th", { scope: "row" }, s.name));
      tr.append(S.node("td", { class: "num" }, String(s.n)));
      tr.append(S.node("td", { class: "num" }, S.fmt(s.median, metric)));
      tr.append(S.node("td", { class: "num" }, S.range(s.q1, s.q3, metric)));
      tr.append(S.node("td", { class: "num" }, S.range(s.ci_low, s.ci_high, metric)));
      tr.append(S.node("td", {}, s.summary));
      body.append(tr);
    }
    box.append(table);
    if (split.kruskal_p !== null) {
      box.append(S.node("p", { class: "summary" }, split.kruskal_p < split.alpha
        ? "Across all segments: clearly different from each other."
        : "Across all segments: not clearly different from each other; could be chance."));
    }
    // statistics: begin (their own names, behind an expandable line)
    const stats = S.node("details", { class: "stats" });
    stats.append(S.node("summary", {}, "The statistics behind this"));
    const lines = split.segments.filter((s) => s.p_holm !== null).map((s) =>
      `${s.name}: rank-biserial r ${(s.rank_biserial > 0 ? "+" : "") + s.rank_biserial.toFixed(2)}, Holm-adjusted Mann–Whitney p ${S.pText(s.p_holm)}`);
    if (split.kruskal_h !== null) {
      lines.push(`Kruskal–Wallis H = ${split.kruskal_h.toFixed(1)}, p ${S.pText(split.kruskal_p)}`);
    }
    for (const l of lines) stats.append(S.node("p", {}, l));
    // statistics: end
    if (lines.length) box.append(stats);
    return box;
  }

  async function drawPlot(body, splitName) {
    const blob = await S.apiBlob("/v1/segments", { ...body, format: "svg", plot: splitName });
    S.showPlot($("s-plot"), blob,
      `Distribution of ${S.metricLabel(body.metric)} in each segment, with medians and their intervals`);
  }

  async function run(ev) {
    ev.preventDefault();
    if (busy) return;
    const err = $("s-error");
    S.clearError(err);
    const topics = $("s-topics").value.split("\n").map((t) => t.trim()).filter(Boolean);
    const by = $("s-by").value || null;
    if (!topics.length && !by) {
      S.showError(err, "Name at least one topic, or choose a split.");
      return;
    }
    const body = { topics, by, metric: $("s-metric").value };
    if ($("s-account").value) body.account = $("s-account").value;
    busy = true;
    $("s-submit").textContent = "Working…";
    $("segments-panel").setAttribute("aria-busy", "true");
    try {
      const r = await S.api("/v1/segments", body);
      const out = $("s-splits");
      out.replaceChildren(...r.splits.map((sp) => renderSplit(sp, r.metric)));
      const notes = r.warnings.concat([r.note]).filter(Boolean);
      $("s-notes").replaceChildren(...notes.map((n) => S.node("li", {}, n)));
      $("s-output").hidden = false;
      $("s-plot").hidden = true;
      if (r.splits.length) await drawPlot(body, r.splits[0].by === "topic" ? "topic" : r.splits[0].by);
    } catch (e) {
      $("s-output").hidden = true;
      S.showError(err, e.message);
    } finally {
      busy = false;
      $("s-submit").textContent = "Split the metric";
      $("segments-panel").setAttribute("aria-busy", "false");
    }
  }

  // The team's own labels kept at import (import --label) join the split choices.
  async function addLabelChoices(select) {
    const r = await S.api("/v1/labels");
    for (const l of r.labels) {
      select.append(S.node("option", { value: `label:${l.name}` }, `label: ${l.name} (${l.posts} posts)`));
    }
  }

  document.addEventListener("DOMContentLoaded", () => {
    $("s-form").addEventListener("submit", run);
    S.fillAccounts($("s-account"), { anyLabel: "every account" })
      .catch((e) => S.showError($("s-error"), e.message));
    addLabelChoices($("s-by")).catch((e) => S.showError($("s-error"), e.message));
  });
})();
