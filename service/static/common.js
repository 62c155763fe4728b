// sounding page: helpers shared by every panel, and the tabs that switch panels.
"use strict";

window.Sounding = (() => {
  const $ = (id) => document.getElementById(id);
  const SVG = "http://www.w3.org/2000/svg";

  function fmt(v, metric) {
    if (v === null || v === undefined) return "–";
    if (metric === "engagement_rate") return (v * 100).toFixed(2) + "%";
    return Math.round(v).toLocaleString("en-GB");
  }

  const metricLabel = (metric) => metric.replace(/_/g, " ");

  function node(tag, attrs, text) {
    const e = document.createElement(tag);
    for (const [k, v] of Object.entries(attrs || {})) e.setAttribute(k, v);
    if (text !== undefined) e.textContent = text;
    return e;
  }

  function svg(tag, attrs, text) {
    const e = document.createElementNS(SVG, tag);
    for (const [k, v] of Object.entries(attrs || {})) e.setAttribute(k, String(v));
    if (text !== undefined) e.textContent = text;
    return e;
  }

  class ApiError extends Error {}

  async function request(path, init) {
    let resp;
    try {
      resp = await fetch(path, init);
    } catch (e) {
      throw new ApiError("The sounding service cannot be reached. Is it still running?");
    }
    if (!resp.ok) {
      let data = null;
      try { data = await resp.json(); } catch (e) { data = null; }
      const err = data && data.error;
      const msg = err && err.message ? err.message : `The service answered ${resp.status}.`;
      const where = err && err.where ? ` (${err.where})` : "";
      throw new ApiError(msg + where);
    }
    return resp;
  }

  // GET when body is undefined, else POST the body as JSON; the answer as JSON.
  async function api(path, body) {
    const resp = await request(path, body === undefined ? {} : {
      method: "POST",
      headers: { "Content-Type": "application/json", "Accept": "application/json" },
      body: JSON.stringify(body),
    });
    return resp.json();
  }

  // POST the body as JSON and take the answer as a blob (a plot).
  async function apiBlob(path, body) {
    const resp = await request(path, {
      method: "POST", headers: { "Content-Type": "application/json" }, body: JSON.stringify(body),
    });
    return resp.blob();
  }

  function showError(box, message) {
    box.querySelector(".error-message").textContent = message;
    box.hidden = false;
  }

  function clearError(box) {
    box.hidden = true;
    box.querySelector(".error-message").textContent = "";
  }

  function niceTicks(lo, hi, count) {
    const span = hi - lo || Math.abs(hi) || 1;
    const raw = span / count;
    const mag = Math.pow(10, Math.floor(Math.log10(raw)));
    const step = [1, 2, 5, 10].map((m) => m * mag).find((s) => span / s <= count) || 10 * mag;
    const out = [];
    for (let t = Math.ceil(lo / step) * step; t <= hi + 1e-9; t += step) out.push(t);
    return out;
  }

  // The accounts, fetched once and shared by every panel's account list.
  let accounts = null;
  async function loadAccounts() {
    if (accounts === null) accounts = await api("/v1/accounts");
    return accounts;
  }

  async function fillAccounts(select, { anyLabel } = {}) {
    // A reference account (a peer's) is searched, never forecast or measured.
    const list = (await loadAccounts()).filter((a) => !a.reference);
    select.replaceChildren();
    if (anyLabel) select.append(node("option", { value: "" }, anyLabel));
    for (const a of list) {
      const label = a.display_name ? `${a.handle} · ${a.display_name}` : a.handle;
      select.append(node("option", { value: a.handle }, label));
    }
    return list;
  }

  function tomorrowNoon() {
    const d = new Date();
    d.setDate(d.getDate() + 1);
    const p = (n) => String(n).padStart(2, "0");
    return `${d.getFullYear()}-${p(d.getMonth() + 1)}-${p(d.getDate())}T12:00`;
  }

  // A datetime-local value as the API's planned_at (seconds added).
  const plannedValue = (v) => (v && v.length === 16 ? v + ":00" : v || undefined);

  // A small horizontal interval: low..high as a band, the median as a dot, on a shared axis.
  function intervalStrip(low, median, high, lo, hi, label) {
    const W = 220, H = 18;
    const f = (x) => Math.log1p(Math.max(x, 0));
    const sx = (x) => 4 + ((f(x) - f(lo)) / ((f(hi) - f(lo)) || 1)) * (W - 8);
    const s = svg("svg", { viewBox: `0 0 ${W} ${H}`, class: "strip", role: "img", "aria-label": label });
    s.append(svg("line", { x1: 4, x2: W - 4, y1: H / 2, y2: H / 2, class: "strip-axis" }));
    s.append(svg("rect", { x: sx(low), y: 4, width: Math.max(2, sx(high) - sx(low)), height: H - 8,
      rx: 3, class: "strip-band" }));
    s.append(svg("circle", { cx: sx(median), cy: H / 2, r: 4, class: "strip-median" }));
    return s;
  }

  // A table with its column headers; rows go in the returned body.
  function table(cls, headers) {
    const t = node("table", { class: cls });
    const head = node("tr");
    for (const h of headers) head.append(node("th", { scope: "col" }, h));
    const thead = node("thead");
    thead.append(head);
    const body = node("tbody");
    t.append(thead, body);
    return { table: t, body };
  }

  // An interval as the tables write it ("–" when there is none).
  function range(low, high, metric) {
    return low === null || low === undefined ? "–" : `${fmt(low, metric)} – ${fmt(high, metric)}`;
  }

  // A p-value as the statistics lines write it.
  function pText(p) {
    if (p === null || p === undefined) return "–";
    return p < 0.001 ? "< 0.001" : p.toFixed(3);
  }

  // A figure (an SVG or PNG blob) into its <img>, freeing the one it replaces.
  const shownPlots = new WeakMap();
  function showPlot(img, blob, alt) {
    if (shownPlots.has(img)) URL.revokeObjectURL(shownPlots.get(img));
    const url = URL.createObjectURL(blob);
    shownPlots.set(img, url);
    img.src = url;
    img.alt = alt;
    img.hidden = false;
  }

  // Tabs: arrow keys, Home and End move between them (the WAI-ARIA tabs pattern),
  // and the address's #fragment opens a panel directly.
  function setupTabs() {
    const tabs = Array.from(document.querySelectorAll('[role="tab"]'));
    function select(tab, focus) {
      for (const t of tabs) {
        const on = t === tab;
        t.setAttribute("aria-selected", String(on));
        t.tabIndex = on ? 0 : -1;
        $(t.getAttribute("aria-controls")).hidden = !on;
      }
      if (focus) tab.focus();
      history.replaceState(null, "", "#" + tab.dataset.panel);
    }
    tabs.forEach((tab, i) => {
      tab.addEventListener("click", () => select(tab, false));
      tab.addEventListener("keydown", (e) => {
        const n = tabs.length;
        const to = { ArrowRight: (i + 1) % n, ArrowLeft: (i - 1 + n) % n, Home: 0, End: n - 1 }[e.key];
        if (to !== undefined) { e.preventDefault(); select(tabs[to], true); }
      });
    });
    const wanted = tabs.find((t) => "#" + t.dataset.panel === location.hash);
    select(wanted || tabs[0], false);
  }

  // Every panel's metric list, and its list of ways to find near-repeats, is
  // a copy of the check form's one, so each list is written once.
  function copyChoices() {
    for (const [id, cls] of [["metric", ".metric-choice"], ["match", ".match-choice"]]) {
      const source = $(id);
      for (const sel of document.querySelectorAll(cls)) {
        sel.replaceChildren(...Array.from(source.options).map((o) => o.cloneNode(true)));
      }
    }
  }

  document.addEventListener("DOMContentLoaded", () => { copyChoices(); setupTabs(); });

  return {
    $, fmt, metricLabel, node, svg, ApiError, api, apiBlob, showError, clearError, niceTicks,
    loadAccounts, fillAccounts, tomorrowNoon, plannedValue, intervalStrip, table, range, pText, showPlot,
  };
})();
