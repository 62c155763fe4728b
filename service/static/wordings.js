// sounding page, "Compare versions" panel: two to six versions of a draft forecast side by side.
"use strict";

(() => {
  const S = window.Sounding;
  const $ = S.$;
  const MAX = 6;
  let busy = false;

  function addWording(value) {
    const list = $("w-list");
    const n = list.children.length + 1;
    if (n > MAX) return;
    const id = `w-text-${n}`;
    const li = S.node("li", { class: "field" });
    li.append(S.node("label", { for: id }, `Version ${n}`));
    const ta = S.node("textarea", { id, rows: "3", class: "w-text" });
    ta.value = value || "";
    li.append(ta);
    list.append(li);
    $("w-add").disabled = n >= MAX;
  }

  function render(r) {
    const all = r.variants.flatMap((v) => [v.low, v.high]);
    const lo = Math.min(...all), hi = Math.max(...all);
    $("w-summary").textContent = r.summary;
    $("w-coverage").textContent = `${Math.round(r.coverage * 100)}% intervals for ${r.account} at `
      + `${r.local_time.replace("T", " ")}; ` + (r.backtested_coverage === null
        ? "not yet tried on past posts."
        : `such intervals held in ${Math.round(r.backtested_coverage * 100)}% of past tries.`);
    $("w-caution").textContent = r.caution;
    const body = $("w-body");
    body.replaceChildren();
    for (const v of r.variants) {
      const tr = S.node("tr");
      tr.append(S.node("td", { class: "num" }, String(v.rank)));
      const text = S.node("td", { class: "w-cell-text" }, v.text);
      for (const w of v.warnings) text.append(S.node("p", { class: "w-warn" }, w));
      tr.append(text);
      const range = S.node("td", { class: "num" });
      range.append(S.intervalStrip(v.low, v.median, v.high, lo, hi,
        `${S.fmt(v.low, r.metric)} to ${S.fmt(v.high, r.metric)}, median ${S.fmt(v.median, r.metric)}`));
      range.append(S.node("span", { class: "w-range" },
        `${S.fmt(v.low, r.metric)} – ${S.fmt(v.high, r.metric)}`));
      tr.append(range);
      tr.append(S.node("td", { class: "num" }, S.fmt(v.median, r.metric)));
      tr.append(S.node("td", {}, v.tied_with_best ? "yes" : "no"));
      const only = v.only_here.length;
      tr.append(S.node("td", { class: "num", title: v.only_here.join(", ") },
        only ? `${only} of its ${v.precedents.length}` : "none"));
      body.append(tr);
    }
    $("w-output").hidden = false;
  }

  async function compare(ev) {
    ev.preventDefault();
    if (busy) return;
    const err = $("w-error");
    S.clearError(err);
    const texts = Array.from(document.querySelectorAll(".w-text"))
      .map((t) => t.value).filter((t) => t.trim());
    if (texts.length < 2) {
      S.showError(err, "Write at least two versions to compare.");
      return;
    }
    busy = true;
    $("w-submit").textContent = "Comparing…";
    $("wordings-panel").setAttribute("aria-busy", "true");
    try {
      render(await S.api("/v1/comparisons", {
        texts, account: $("w-account").value, metric: $("w-metric").value,
        planned_at: S.plannedValue($("w-planned").value), match: $("w-match").value,
      }));
    } catch (e) {
      $("w-output").hidden = true;
      S.showError(err, e.message);
    } finally {
      busy = false;
      $("w-submit").textContent = "Compare";
      $("wordings-panel").setAttribute("aria-busy", "false");
    }
  }

  document.addEventListener("DOMContentLoaded", () => {
    addWording(); addWording();
    $("w-add").addEventListener("click", () => addWording());
    $("w-planned").value = S.tomorrowNoon();
    $("w-form").addEventListener("submit", compare);
    S.fillAccounts($("w-account")).catch((e) => S.showError($("w-error"), e.message));
  });
})();
