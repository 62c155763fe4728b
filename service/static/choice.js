// The check tab's "every account" choice: the draft's forecast for each account, best first.
"use strict";

(() => {
  const S = window.Sounding;
  const { $, fmt, node } = S;
  // Never a handle (handles hold no spaces), so it cannot hide a real account.
  const EVERY = "(every account)";

  function addChoice(select) {
    select.append(node("option", { value: EVERY }, "every account"));
  }

  async function check(body) {
    const ask = {
      text: body.text, accounts: ["all"], metric: body.metric, has_media: body.has_media,
      match: body.match,
    };
    if (body.planned_at) ask.planned_at = body.planned_at;
    const c = await S.api("/v1/account-choices", ask);
    render(c);
    return c;
  }

  function render(c) {
    $("choice-summary").textContent = c.summary;
    const held = c.backtested_coverage === null
      ? "not yet tried on past posts"
      : `such intervals held in ${Math.round(c.backtested_coverage * 100)}% of past tries`;
    $("choice-coverage").textContent = `${Math.round(c.coverage * 100)}% intervals; ${held}`;
    const body = $("choice-body");
    body.replaceChildren();
    for (const r of c.accounts) {
      const tr = node("tr", { "data-account": r.account });
      tr.append(node("td", {}, String(r.rank)));
      tr.append(node("th", { scope: "row" }, r.account));
      tr.append(node("td", {}, r.local_time.replace("T", " ")));
      tr.append(node("td", {}, `${fmt(r.low, c.metric)} to ${fmt(r.high, c.metric)}`));
      tr.append(node("td", {}, fmt(r.median, c.metric)));
      tr.append(node("td", {}, r.tied_with_best ? "yes" : "no"));
      tr.append(node("td", {}, r.reason));
      body.append(tr);
    }
    $("choice-left").textContent = c.left_out.length ? `Left out: ${c.left_out.join("; ")}.` : "";
    $("choice-left").hidden = !c.left_out.length;
    $("choice-note").textContent = c.note;
    $("choice-caution").textContent = c.caution;
    // statistics: begin (their own names, for the analyst, behind an expandable line)
    $("choice-stats").textContent = `Rule: ${c.rule}. Similar: cosine similarity at least `
      + `${c.similarity_threshold}. ` + c.accounts.map((r) => `${r.account}: log1p `
      + `${r.log1p_low.toFixed(3)} / ${r.log1p_median.toFixed(3)} / ${r.log1p_high.toFixed(3)}`
      + (r.tied_with.length ? ` (about equal to ${r.tied_with.join(", ")})` : "")).join("; ");
    // statistics: end
  }

  S.choice = { EVERY, addChoice, check };
})();
