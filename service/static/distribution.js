// sounding page, "Spread of reach" panel: how a metric is spread over the settled posts, and
// which law its top follows, from GET /v1/distribution.
"use strict";

(() => {
  const S = window.Sounding;
  const $ = S.$;
  let busy = false;

  function query(format) {
    const q = new URLSearchParams({ metric: $("d-metric").value, format });
    if ($("d-account").value) q.set("account", $("d-account").value);
    if ($("d-since").value) q.set("since", $("d-since").value);
    return "/v1/distribution?" + q.toString();
  }

  function fill(r) {
    const m = r.metric;
    const s = r.summary;
    const cells = [S.fmt(s.median, m), S.range(s.q1, s.q3, m), S.fmt(s.p90, m),
      S.fmt(s.p99, m), `the top ${Math.round(100 * s.half_share)}% of posts`];
    $("d-summary-row").replaceChildren(...cells.map((c) => S.node("td", { class: "num" }, c)));
    $("d-reading").textContent = r.reading;
    const rows = (r.tail ? r.tail.comparisons : []).map((c) => {
      const tr = S.node("tr");
      tr.append(S.node("th", { scope: "row" }, `${c.first} vs ${c.second}`));
      tr.append(S.node("td", {}, c.favoured || "cannot tell apart"));
      tr.append(S.node("td", { class: "num" }, S.pText(c.p_value)));
      return tr;
    });
    $("d-fits-body").replaceChildren(...rows);
    $("d-tail").textContent = r.tail
      ? `Fitted to the top ${Math.round(100 * r.tail.tail_share)}% of posts (${r.tail.n_tail}, from ${S.fmt(r.tail.xmin, m)} up).`
      : "Too few posts above zero to fit the laws.";
    $("d-note").textContent = r.note;
  }

  async function run(ev) {
    ev.preventDefault();
    if (busy) return;
    const err = $("d-error");
    S.clearError(err);
    busy = true;
    $("d-submit").textContent = "Working…";
    $("spread-panel").setAttribute("aria-busy", "true");
    try {
      const r = await S.api(query("json"));
      fill(r);
      $("d-output").hidden = false;
      const resp = await fetch(query("svg"));
      if (resp.ok) {
        S.showPlot($("d-plot"), await resp.blob(),
          `Histogram of ${S.metricLabel(r.metric)} on a log axis, median and percentiles marked`);
      }
    } catch (e) {
      $("d-output").hidden = true;
      S.showError(err, e.message);
    } finally {
      busy = false;
      $("d-submit").textContent = "Show the spread";
      $("spread-panel").setAttribute("aria-busy", "false");
    }
  }

  document.addEventListener("DOMContentLoaded", () => {
    $("d-form").addEventListener("submit", run);
    S.fillAccounts($("d-account"), { anyLabel: "every account" })
      .catch((e) => S.showError($("d-error"), e.message));
  });
})();
