// The import page: a dry run first (POST /v1/imports?dry_run=true), then the import.
(function () {
  "use strict";
  const $ = (id) => document.getElementById(id);

  function node(tag, text) {
    const el = document.createElement(tag);
    if (text !== undefined) el.textContent = text;
    return el;
  }

  function form() {
    const fd = new FormData();
    const file = $("file").files[0];
    if (file) fd.append("file", file, file.name);
    for (const line of $("map").value.split("\n")) {
      if (line.trim()) fd.append("map", line.trim());
    }
    for (const [id, name] of [["account", "account"], ["mapping", "mapping"], ["timezone", "timezone"],
                              ["encoding", "encoding"],
                              ["time-format", "time_format"], ["date-order", "date_order"]]) {
      if ($(id).value.trim()) fd.append(name, $(id).value.trim());
    }
    if ($("decimal-comma").checked) fd.append("decimal_comma", "true");
    if ($("new-account").checked) fd.append("new_account", "true");
    return fd;
  }

  // The service's messages name command-line options; the page says what to do here instead.
  const WORDS = [
    [/create it with `sounding account HANDLE --timezone ZONE`, or import with --new-account --timezone ZONE/g,
      "to create it, give its time zone and tick \u201cThe file names a new account\u201d"],
    [/--new-account needs --timezone/g, "a new account needs its time zone"],
    [/give --day-first or --month-first/g, "choose the order under \u201cNumeric dates\u201d"],
    [/--day-first \/ --month-first/g, "the order under \u201cNumeric dates\u201d"],
    [/--time-format/g, "the time format"],
    [/rename with --map ours=theirs/g, "add the column to the column mapping (ours=theirs)"],
    [/--map/g, "the column mapping"],
    [/--account/g, "the account field"],
    [/--timezone/g, "the time zone field"],
    [/--decimal-comma/g, "the decimal comma box"],
    [/--encoding/g, "the text encoding field"],
  ];
  function pageWords(text) {
    let out = text || "";
    for (const [re, words] of WORDS) out = out.replace(re, words);
    return out;
  }

  async function loadMappings() {
    const resp = await fetch("/v1/mappings").catch(() => null);
    if (!resp || !resp.ok) return;
    const body = await resp.json();
    for (const name of body.mappings || []) $("mapping").append(node("option", name));
  }

  async function send(dryRun) {
    $("error").hidden = true;
    const token = $("token").value.trim();
    const resp = await fetch("/v1/imports" + (dryRun ? "?dry_run=true" : ""), {
      method: "POST",
      headers: token ? { Authorization: "Bearer " + token } : {},
      body: form(),
    });
    const body = await resp.json().catch(() => ({}));
    if (!resp.ok) {
      const e = body.error || {};
      const said = (e.message || resp.statusText) + (e.hint ? " (" + e.hint + ")" : "");
      $("error-message").textContent = resp.status === 401 && !dryRun
        ? "Importing needs the service's access token: enter it in the token field." : pageWords(said);
      $("error").hidden = false;
      return null;
    }
    return body;
  }

  function fill(tbody, rows) {
    tbody.replaceChildren();
    for (const cells of rows) {
      const tr = node("tr");
      for (const c of cells) tr.append(node("td", c));
      tbody.append(tr);
    }
  }

  function problems(list) {
    const ul = $("problems");
    ul.replaceChildren();
    for (const p of list.slice(0, 20)) {
      ul.append(node("li", "line " + p.line + (p.column ? ", " + p.column : "") + ": " +
        pageWords(p.reason) + (p.hint ? " (" + pageWords(p.hint) + ")" : "")));
    }
  }

  async function preview(ev) {
    ev.preventDefault();
    $("commit").disabled = true;
    const p = await send(true);
    if (!p) return;
    fill($("columns").tBodies[0], p.columns.map((c) => [c.ours, c.theirs || "-", c.reads]));
    fill($("rows").tBodies[0], p.rows.map((r) => [
      String(r.line), r.account + " " + r.post_id, r.posted_at.slice(0, 16).replace("T", " "),
      r.local_time.slice(0, 16).replace("T", " ") + r.local_time.slice(19) + " " + r.zone,
      Object.entries(r.metrics).filter(([, v]) => v !== null)
        .map(([k, v]) => k + " " + (r.approximate.includes(k) ? "~" : "") + v.toLocaleString("en"))
        .join(", "),
    ]));
    problems(p.problems);
    $("summary").textContent = "Preview, nothing stored: " + p.would_import + " rows would be imported, " +
      p.rejected + " would be rejected." + (p.stopped ? " " + p.stopped : "");
    $("preview-output").hidden = false;
    $("commit").disabled = false;
  }

  async function commit() {
    $("commit").disabled = true;
    const s = await send(false);
    if (!s) return;
    problems(s.problems);
    $("summary").textContent = "Imported: added " + s.added + ", updated " + s.updated +
      ", unchanged " + s.unchanged + ", rejected " + s.rejected + ".";
  }

  loadMappings();
  $("import-form").addEventListener("submit", preview);
  $("commit").addEventListener("click", commit);
})();
