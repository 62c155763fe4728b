// sounding page, "The team" panel: each account side by side, from GET /v1/team.
"use strict";

(() => {
  const S = window.Sounding;
  const $ = S.$;
  let busy = false;

  function render(t) {
    const body = $("tm-body");
    body.replaceChildren();
    const cards = [];
    for (const a of t.accounts) {
      const tr = S.node("tr", { "data-account": a.account });
      tr.append(S.node("th", { scope: "row" }, a.account));
      tr.append(S.node("td", {}, a.settled.toLocaleString("en-GB")));
      tr.append(S.node("td", {}, `${Math.round(a.share * 100)}%`));
      tr.append(S.node("td", {}, a.first_post ? a.first_post.slice(0, 10) : "-"));
      tr.append(S.node("td", {}, a.last_post ? a.last_post.slice(0, 10) : "-"));
      tr.append(S.node("td", {}, a.median === null ? "-" : S.fmt(a.median, t.metric)));
      body.append(tr);
      const card = S.node("section", { class: "card", "data-account": a.account });
      card.append(S.node("h3", {}, `${a.account} (${a.timezone})`));
      const list = S.node("ul", { class: "notes" });
      for (const line of a.lines) list.append(S.node("li", {}, line));
      card.append(list);
      cards.push(card);
    }
    $("tm-cards").replaceChildren(...cards);
    // statistics: begin (their own names, for the analyst, behind an expandable line)
    $("tm-stats").textContent = t.accounts.map((a) => {
      const parts = [`${a.account}:`];
      if (a.trend) parts.push(`Theil–Sen slope of log weekly medians ${a.trend.slope.toFixed(4)} `
        + `(95% ${a.trend.slope_low.toFixed(4)} to ${a.trend.slope_high.toFixed(4)}) over ${a.trend.periods} weeks`);
      if (a.best_hours && a.best_hours.p_holm !== null) {
        parts.push(`best hours Mann–Whitney Holm p ${a.best_hours.p_holm.toPrecision(2)}`);
      }
      for (const b of a.better_topics) parts.push(`${b.topic}: lift ${b.lift.toFixed(2)} vs ${b.team_lift.toFixed(2)}, Holm p ${b.p_holm.toPrecision(2)}`);
      return parts.join("; ");
    }).join(" · ");
    // statistics: end
    $("tm-note").textContent = t.note;
  }

  async function run(ev) {
    ev.preventDefault();
    if (busy) return;
    const err = $("tm-error");
    S.clearError(err);
    busy = true;
    $("tm-submit").textContent = "Working…";
    $("team-panel").setAttribute("aria-busy", "true");
    try {
      render(await S.api("/v1/team?" + new URLSearchParams({ metric: $("tm-metric").value })));
      $("tm-output").hidden = false;
    } catch (e) {
      $("tm-output").hidden = true;
      S.showError(err, e.message);
    } finally {
      busy = false;
      $("tm-submit").textContent = "Show the team";
      $("team-panel").setAttribute("aria-busy", "false");
    }
  }

  document.addEventListener("DOMContentLoaded", () => {
    $("tm-form").addEventListener("submit", run);
  });
})();
