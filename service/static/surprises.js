// sounding page, "Surprises" panel: settled posts far outside the forecast made for them at their
// time, with their precedents and what moved the forecast, from GET /v1/surprises.
"use strict";

(() => {
  const S = window.Sounding;
  const $ = S.$;
  let busy = false;

  function card(title, items, metric) {
    const box = S.node("section", { class: "card x-list" });
    box.append(S.node("h3", {}, title));
    const list = S.node("ol", { class: "precedents" });
    for (const s of items) {
      const li = S.node("li", { class: "x-item", "data-post": s.post_id });
      li.append(S.node("p", { class: "x-text" }, s.text));
      li.append(S.node("p", { class: "x-figures" },
        `${S.fmt(s.outcome, metric)} against a range of ${S.fmt(s.low, metric)} to ${S.fmt(s.high, metric)}`));
      const moved = S.node("ul", { class: "notes" });
      for (const m of s.moved) moved.append(S.node("li", {}, m));
      li.append(moved);
      if (s.precedents.length) {
        li.append(S.node("p", { class: "help" }, "Posts it resembled then: " + s.precedents
          .map((p) => `${p.text.slice(0, 80)} (${S.fmt(p.value, metric)})`).join(" · ")));
      }
      list.append(li);
    }
    box.append(list);
    return box;
  }

  async function run(ev) {
    ev.preventDefault();
    if (busy) return;
    const err = $("x-error");
    S.clearError(err);
    busy = true;
    $("x-submit").textContent = "Working…";
    $("surprises-panel").setAttribute("aria-busy", "true");
    try {
      const r = await S.api("/v1/surprises?" + new URLSearchParams({ metric: $("x-metric").value }));
      $("x-summary").textContent = `${r.outside} of ${r.n_forecast} settled posts fell outside their `
        + `${Math.round(100 * r.coverage)}% range.`;
      $("x-lists").replaceChildren(card("Did far better", r.better, r.metric),
        card("Did far worse", r.worse, r.metric));
      $("x-note").textContent = r.note;
      $("x-output").hidden = false;
    } catch (e) {
      $("x-output").hidden = true;
      S.showError(err, e.message);
    } finally {
      busy = false;
      $("x-submit").textContent = "Find the surprises";
      $("surprises-panel").setAttribute("aria-busy", "false");
    }
  }

  document.addEventListener("DOMContentLoaded", () => {
    $("x-form").addEventListener("submit", run);
  });
})();
