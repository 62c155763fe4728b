// The page's check tab: forecasts a draft through the same-origin API and draws two small SVG charts.
"use strict";

(() => {
  const S = window.Sounding;
  const { $, fmt, metricLabel, node, svg, api, ApiError, niceTicks } = S;
  const zones = {};
  let busy = false;
  // The last check's request, with its planned time fixed: "I'll post this" records
  // exactly the forecast shown.
  let lastBody = null;

  function valueOf(metrics, metric) {
    if (metric === "engagement_rate") {
      const imp = metrics.impressions, eng = metrics.engagements;
      return imp && eng !== null && eng !== undefined ? eng / imp : null;
    }
    const v = metrics[metric];
    return v === undefined ? null : v;
  }

  const errorBox = () => $("error");
  const showError = (message) => S.showError(errorBox(), message);
  const clearError = () => S.clearError(errorBox());

  // ---------------------------------------------------------------- setup

  function showZone() {
    if ($("account").value === S.choice.EVERY) {
      $("planned-help").textContent = "Wall-clock time in each account's own time zone.";
      return;
    }
    const tz = zones[$("account").value];
    $("planned-help").textContent = tz
      ? `Wall-clock time in ${tz}, the account's time zone.`
      : "Wall-clock time in the account's own time zone.";
  }

  async function loadAccounts() {
    const sel = $("account");
    try {
      const accounts = await S.fillAccounts(sel);
      for (const a of accounts) zones[a.handle] = a.timezone;
      if (accounts.length > 1) S.choice.addChoice(sel);
      $("account-help").textContent = accounts.length
        ? `${accounts.length} ${accounts.length === 1 ? "account" : "accounts"} in this store.`
        : "No accounts yet: import some history first.";
      showZone();
    } catch (e) {
      $("account-help").textContent = "Accounts could not be loaded.";
      showError(e.message);
    }
  }

  // ---------------------------------------------------------------- rendering

  function renderForecast(f) {
    $("fc-low").textContent = fmt(f.low, f.metric);
    $("fc-high").textContent = fmt(f.high, f.metric);
    $("fc-median").textContent = fmt(f.median, f.metric);
    $("fc-metric").textContent = metricLabel(f.metric);
    const bt = f.backtested_coverage === null
      ? "not yet tried on past posts"
      : `such intervals held in ${Math.round(f.backtested_coverage * 100)}% of past tries`;
    $("fc-coverage").textContent = `${Math.round(f.coverage * 100)}% interval; ${bt}`;
    // statistics: begin (their own names, for the analyst, behind an expandable line)
    const c = f.calibration;
    $("fc-stats-text").textContent = [
      `Stated coverage ${f.coverage}; backtested coverage ${f.backtested_coverage === null ? "none" : f.backtested_coverage}.`,
      c ? `Calibration ${c.method} (CQR, Romano et al. 2019; +aci: adaptive conformal inference, Gibbs & Candès 2021), alpha_t ${c.alpha_t.toFixed(3)}.` : "",
    ].join(" ");
    // statistics: end
    $("fc-caution").textContent = f.caution;
    $("fc-note").textContent = f.note || "";
    $("fc-note").hidden = !f.note;
    $("fc-when").textContent = `${f.account} at ${f.local_time.replace("T", " ")} · model ${f.model_version}`;

    const list = $("warn-list");
    list.replaceChildren(...f.warnings.map((w) => node("li", {}, w)));
    $("warn-card").hidden = f.warnings.length === 0;

    const body = $("contrib-body");
    body.replaceChildren();
    for (const g of f.contributions.groups) {
      const tr = node("tr");
      tr.append(node("td", {}, g.group));
      const pct = Math.round((g.factor - 1) * 100);
      const cls = pct > 0 ? "factor up" : pct < 0 ? "factor down" : "factor";
      const sign = pct > 0 ? "+" : "";
      tr.append(node("td", { class: cls }, `×${g.factor.toFixed(2)} (${sign}${pct}%)`));
      tr.append(node("td", {}, why(g)));
      body.append(tr);
    }

    const ol = $("prec-list");
    ol.replaceChildren();
    for (const p of f.precedents.slice(0, 10)) {
      const li = node("li");
      li.append(node("p", { class: "prec-text" }, p.text));
      const meta = node("p", { class: "prec-meta" });
      const v = valueOf(p.metrics, f.metric);
      meta.textContent = [
        `similarity ${p.similarity.toFixed(2)}`, p.account, p.posted_at.slice(0, 10),
        `${fmt(v, f.metric)} ${metricLabel(f.metric)}`, `weight ${p.weight.toFixed(2)}`,
      ].join(" · ");
      if (p.still_gathering) meta.append(" · ", node("span", { class: "gathering-tag" }, "still gathering"));
      li.append(meta);
      ol.append(li);
    }
    if (!f.precedents.length) ol.append(node("li", {}, "No similar past posts yet."));
    drawScatter(f);
  }

  // The summary reads "group: x1.23 (+23%), reason"; the table already shows the first parts.
  function why(g) {
    let text = g.summary;
    if (text.startsWith(g.group + ": ")) text = text.slice(g.group.length + 2);
    const m = text.match(/^x\d+\.\d+ \([^)]*\), (.+)$/);
    return m ? m[1] : text;
  }

  function drawScatter(f) {
    const box = $("scatter-chart");
    box.replaceChildren();
    const W = 640, H = 260, L = 62, R = 16, T = 14, B = 40;
    const pts = f.precedents
      .map((p) => ({ x: p.similarity, y: valueOf(p.metrics, f.metric), gathering: p.still_gathering, p }))
      .filter((d) => d.y !== null);
    const chart = svg("svg", {
      viewBox: `0 0 ${W} ${H}`, role: "img",
      "aria-label": `${pts.length} precedents: ${metricLabel(f.metric)} against similarity to the draft`,
    });
    chart.append(svg("title", {}, "Precedents' metric against their similarity"));
    if (!pts.length) {
      chart.append(svg("text", { x: W / 2, y: H / 2, "text-anchor": "middle", class: "empty" },
        "No precedent has this metric yet."));
      box.append(chart);
      return;
    }
    const ys = pts.map((d) => d.y).concat([f.low, f.high]);
    let y0 = Math.min(...ys), y1 = Math.max(...ys);
    const pad = (y1 - y0) * 0.08 || 1;
    y0 = Math.max(0, y0 - pad); y1 += pad;
    let x0 = Math.min(...pts.map((d) => d.x)), x1 = Math.max(...pts.map((d) => d.x));
    const xpad = (x1 - x0) * 0.06 || 0.02;
    x0 -= xpad; x1 += xpad;
    const sx = (x) => L + ((x - x0) / (x1 - x0)) * (W - L - R);
    const sy = (y) => T + (1 - (y - y0) / (y1 - y0)) * (H - T - B);

    for (const t of niceTicks(y0, y1, 5)) {
      chart.append(svg("line", { x1: L, x2: W - R, y1: sy(t), y2: sy(t), class: "grid" }));
      chart.append(svg("text", { x: L - 6, y: sy(t) + 4, "text-anchor": "end", class: "tick" },
        fmt(t, f.metric)));
    }
    chart.append(svg("rect", {
      x: L, width: W - L - R, y: sy(f.high), height: Math.max(1, sy(f.low) - sy(f.high)),
      class: "range-band",
    }));
    for (const t of niceTicks(x0, x1, 6)) {
      chart.append(svg("text", { x: sx(t), y: H - B + 16, "text-anchor": "middle", class: "tick" },
        t.toFixed(2)));
    }
    chart.append(svg("line", { x1: L, x2: W - R, y1: H - B, y2: H - B, class: "axis" }));
    chart.append(svg("line", { x1: L, x2: L, y1: T, y2: H - B, class: "axis" }));
    chart.append(svg("text", { x: (L + W - R) / 2, y: H - 6, "text-anchor": "middle", class: "tick" },
      "similarity to the draft"));
    chart.append(svg("text", {
      x: 14, y: (T + H - B) / 2, "text-anchor": "middle", class: "tick",
      transform: `rotate(-90 14 ${(T + H - B) / 2})`,
    }, metricLabel(f.metric)));
    for (const d of pts) {
      const c = svg("circle", {
        cx: sx(d.x), cy: sy(d.y), r: 5, class: d.gathering ? "pt-gathering" : "pt-settled",
      });
      c.append(svg("title", {}, `${d.p.post_id}: ${fmt(d.y, f.metric)}, similarity ${d.x.toFixed(2)}`));
      chart.append(c);
    }
    box.append(chart);
  }

  function drawHours(h, plannedIso) {
    const box = $("hours-chart");
    box.replaceChildren();
    $("hours-title").textContent = `Hour by hour on ${h.first_day} (${h.timezone})`;
    $("hours-summary").textContent = h.summary;
    const s = h.slots;
    const W = 640, H = 220, L = 62, R = 16, T = 14, B = 34;
    const chart = svg("svg", {
      viewBox: `0 0 ${W} ${H}`, role: "img",
      "aria-label": `Forecast ${metricLabel(h.metric)} for each of ${s.length} hours. ${h.summary}`,
    });
    chart.append(svg("title", {}, "Forecast range for each hour of the day"));
    const y1 = Math.max(...s.map((d) => d.high)) * 1.05 || 1;
    const sx = (i) => L + (s.length === 1 ? 0.5 : i / (s.length - 1)) * (W - L - R);
    const sy = (y) => T + (1 - y / y1) * (H - T - B);
    for (const t of niceTicks(0, y1, 4)) {
      chart.append(svg("line", { x1: L, x2: W - R, y1: sy(t), y2: sy(t), class: "grid" }));
      chart.append(svg("text", { x: L - 6, y: sy(t) + 4, "text-anchor": "end", class: "tick" },
        fmt(t, h.metric)));
    }
    const upper = s.map((d, i) => `${sx(i)},${sy(d.high)}`);
    const lower = s.map((d, i) => `${sx(i)},${sy(d.low)}`).reverse();
    chart.append(svg("polygon", { points: upper.concat(lower).join(" "), class: "band" }));
    chart.append(svg("polyline", {
      points: s.map((d, i) => `${sx(i)},${sy(d.median)}`).join(" "), class: "median",
    }));
    // One source for the dots, the sentence and the command line: each slot's own flags.
    s.forEach((d, i) => {
      if (d.tied_with_best || d.few_posts) {
        const c = svg("circle", {
          cx: sx(i), cy: sy(d.median), r: 4, class: d.tied_with_best ? "best" : "few",
        });
        const what = d.tied_with_best ? "tied with the best"
          : "few or no posts at this hour: the forecast leans on other hours";
        c.append(svg("title", {}, `${d.local_hour} (UTC${d.utc_offset}): median ${fmt(d.median, h.metric)}; ${what}`));
        chart.append(c);
      }
      const last = i === s.length - 1 && i % 3 === 2;
      if (i % 3 === 0 || last) {
        chart.append(svg("text", { x: sx(i), y: H - B + 16, "text-anchor": "middle", class: "tick" },
          d.local_hour));
      }
    });
    const when = Date.parse(plannedIso);
    const at = s.findIndex((d, i) => {
      const start = Date.parse(d.planned_at);
      const next = i + 1 < s.length ? Date.parse(s[i + 1].planned_at) : start + 3600e3;
      return when >= start && when < next;
    });
    if (at >= 0) {
      chart.append(svg("line", { x1: sx(at), x2: sx(at), y1: T, y2: H - B, class: "now-line" }));
      chart.append(svg("text", {
        x: Math.min(sx(at) + 4, W - R - 60), y: T + 10, class: "now-label",
      }, "planned"));
    }
    chart.append(svg("line", { x1: L, x2: W - R, y1: H - B, y2: H - B, class: "axis" }));
    box.append(chart);
  }

  // ---------------------------------------------------------------- submit

  async function check(ev) {
    ev.preventDefault();
    if (busy) return;
    busy = true;
    clearError();
    const results = $("results");
    results.setAttribute("aria-busy", "true");
    $("submit").textContent = "Checking…";
    $("submit").setAttribute("aria-disabled", "true");
    const planned = $("planned").value;
    const body = {
      text: $("text").value,
      account: $("account").value,
      metric: $("metric").value,
      has_media: $("media").checked,
      match: $("match").value,
      record: false,  // trying things out is never recorded
    };
    if (planned) body.planned_at = S.plannedValue(planned);
    try {
      if (body.account === S.choice.EVERY) {
        await S.choice.check(body);
        lastBody = null;
        $("output").hidden = true;
        $("placeholder").hidden = true;
        $("choice-output").hidden = false;
        return;
      }
      $("choice-output").hidden = true;
      const f = await api("/v1/forecasts", body);
      renderForecast(f);
      lastBody = { ...body, planned_at: f.planned_at };
      resetRecord();
      $("placeholder").hidden = true;
      $("output").hidden = false;
      try {
        const h = await api("/v1/hours", {
          text: body.text, account: body.account, metric: body.metric,
          has_media: body.has_media, day: f.local_time.slice(0, 10), match: body.match,
        });
        drawHours(h, f.planned_at);
      } catch (e) {
        $("hours-chart").replaceChildren();
        $("hours-summary").textContent = `The hour-by-hour forecast is not available: ${e.message}`;
      }
    } catch (e) {
      $("output").hidden = true;
      $("choice-output").hidden = true;
      $("placeholder").hidden = false;
      showError(e instanceof ApiError ? e.message : `Unexpected problem: ${e.message}`);
    } finally {
      busy = false;
      results.setAttribute("aria-busy", "false");
      $("submit").textContent = "Check draft";
      $("submit").removeAttribute("aria-disabled");
    }
  }

  function resetRecord() {
    $("record").disabled = false;
    $("record").textContent = "I'll post this";
    $("record-note").textContent = "Trying a draft out is never recorded. Say you will post it, "
      + "and the track record will score this forecast once the post's numbers are in.";
  }

  // Recorded only when the person says the draft will go out.
  async function record() {
    if (!lastBody || $("record").disabled) return;
    $("record").disabled = true;
    try {
      await api("/v1/forecasts", { ...lastBody, record: true });
      $("record").textContent = "Recorded";
      $("record-note").textContent = "In the track record: once the post is imported, "
        + "this forecast is scored against its numbers.";
      document.dispatchEvent(new CustomEvent("sounding:recorded"));
    } catch (e) {
      $("record").disabled = false;
      showError(e instanceof ApiError ? e.message : `Unexpected problem: ${e.message}`);
    }
  }

  document.addEventListener("DOMContentLoaded", () => {
    $("planned").value = S.tomorrowNoon();
    $("record").addEventListener("click", record);
    $("account").addEventListener("change", showZone);
    $("draft-form").addEventListener("submit", check);
    $("text").addEventListener("keydown", (e) => {
      if (e.key === "Enter" && (e.ctrlKey || e.metaKey)) {
        e.preventDefault();
        $("draft-form").requestSubmit();
      }
    });
    loadAccounts();
  });
})();
