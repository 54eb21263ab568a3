// Data files: resumable uploads over tus 1.0 with progress, rate and time left;
// the SHA-256 computed here, declared, and confirmed by the server; the list of
// readable files; a file's lineage drawn as a graph of derivations.
"use strict";
(function () {
  const $ = (s) => document.querySelector(s);
  const SVG = "http://www.w3.org/2000/svg";
  const hashLimit = 1 << 30; // larger files are hashed by the server alone

  const hex = (buf) => Array.from(new Uint8Array(buf), (b) => b.toString(16).padStart(2, "0")).join("");
  const b64hex = (b64) => hex(Uint8Array.from(atob(b64), (c) => c.charCodeAt(0)).buffer);
  function duration(s) {
    if (!isFinite(s)) return "—";
    if (s < 60) return Math.ceil(s) + " s";
    if (s < 3600) return Math.floor(s / 60) + " min " + Math.round(s % 60) + " s";
    return Math.floor(s / 3600) + " h " + Math.round((s % 3600) / 60) + " min";
  }

  async function digest(file) {
    if (file.size > hashLimit || !crypto.subtle) return "";
    return hex(await crypto.subtle.digest("SHA-256", await file.arrayBuffer()));
  }

  function entry(file) {
    const bar = BL.el("progress", { max: "100", value: "0", "aria-label": "Upload of " + file.name });
    const status = BL.el("span", { class: "up-status", text: "hashing…" });
    const rate = BL.el("span", { class: "up-rate" });
    const sha = BL.el("code", { class: "sha" });
    const li = BL.el("li", { class: "upload" }, BL.el("strong", { text: file.name }), " ", BL.el("span", { class: "note", text: BL.bytes(file.size) }),
      bar, status, " ", rate, BL.el("div", {}, "SHA-256 ", sha));
    $("#uploads").append(li);
    return { li, bar, status, rate, sha };
  }

  async function send(file) {
    const acq = $("#up-acquisition").value;
    const ui = entry(file);
    if (!acq) { ui.status.textContent = "choose an acquisition first"; ui.li.classList.add("failed"); return; }
    const sha = await digest(file);
    ui.sha.textContent = sha ? sha + " (computed here)" : "computed by the server as the bytes arrive";
    const meta = { acquisition_id: acq, filename: file.name, media_type: file.type || "application/octet-stream" };
    if (sha) meta.sha256 = sha;
    // The rate counts from the start of this attempt; a resumed upload counts from
    // the bytes the server already held.
    let started = performance.now(), base = 0;
    const upload = new tus.Upload(file, {
      endpoint: "/api/v1/uploads",
      chunkSize: 64 << 20,
      retryDelays: [0, 1000, 3000, 5000, 10000, 20000],
      metadata: meta,
      headers: { "X-CSRF-Token": BL.csrf() },
      storeFingerprintForResuming: true,
      removeFingerprintOnSuccess: true,
      onProgress(sent, total) {
        if (base === null) { started = performance.now(); base = sent; }
        const secs = (performance.now() - started) / 1000;
        const rate = secs > 0 ? (sent - base) / secs : 0;
        const pct = total ? Math.floor((sent / total) * 100) : 0;
        ui.bar.value = pct;
        ui.status.textContent = pct + " % · " + BL.bytes(sent) + " of " + BL.bytes(total);
        if (rate > 0) ui.rate.textContent = BL.bytes(rate) + "/s · " + duration((total - sent) / rate) + " left";
      },
      onAfterResponse(req, res) {
        const d = res.getHeader("Repr-Digest");
        const m = d && /sha-256=:([^:]+):/.exec(d);
        if (m) {
          const server = b64hex(m[1]);
          ui.sha.textContent = server + (sha && sha === server ? " (computed here, confirmed by the server)" : " (computed by the server)");
          ui.li.dataset.fileId = res.getHeader("Data-File-Id") || "";
        }
      },
      onError(err) {
        ui.li.classList.add("failed");
        let msg = String(err && err.message || err);
        const body = err && err.originalResponse && err.originalResponse.getBody();
        try { const e = JSON.parse(body).error; if (e) msg = e.message; } catch (_) { /* not JSON */ }
        ui.status.textContent = "stopped: " + msg + " — drop the file again to resume";
      },
      onSuccess() {
        ui.li.classList.add("done");
        ui.status.textContent = "stored · " + ui.status.textContent;
        listFiles();
      },
    });
    const previous = await upload.findPreviousUploads();
    if (previous.length) { upload.resumeFromPreviousUpload(previous[0]); ui.status.textContent = "resuming…"; base = null; }
    started = performance.now();
    upload.start();
  }

  async function listFiles() {
    const r = await BL.api("/api/v1/files?limit=100");
    const tb = $("#file-list tbody");
    if (!r.ok) { BL.showError(tb, r.body); return; }
    tb.replaceChildren(...r.body.items.map((f) => {
      const b = BL.el("button", { type: "button", class: "quiet small", "data-file": f.id, text: "Lineage" });
      b.addEventListener("click", () => lineage(f.id));
      return BL.el("tr", {}, BL.el("td", { text: f.file_name }), BL.el("td", { text: BL.bytes(f.size_bytes) }),
        BL.el("td", {}, BL.el("code", { class: "sha", title: f.sha256, text: f.sha256.slice(0, 16) + "…" })), BL.el("td", {}, b));
    }));
  }

  // lineage lays the graph out in columns by derivation depth: sources left,
  // products right, each derivation a node between its inputs and its output.
  async function lineage(id) {
    const r = await BL.api("/api/v1/files/" + id + "/lineage");
    const box = $("#lineage");
    if (!r.ok) { BL.showError(box, r.body); return; }
    const files = new Map(r.body.files.map((f) => [f.id, f]));
    const derivs = r.body.derivations;
    const depth = new Map();
    const producer = new Map(derivs.map((d) => [d.output_file_id, d]));
    const fileDepth = (fid, seen = new Set()) => {
      if (depth.has(fid)) return depth.get(fid);
      const d = producer.get(fid);
      let v = 0;
      if (d && !seen.has(fid)) { seen.add(fid); v = 2 + Math.max(0, ...d.input_file_ids.map((i) => fileDepth(i, seen))); }
      depth.set(fid, v);
      return v;
    };
    const nodes = [];
    const ids = new Set([id, ...files.keys()]);
    for (const d of derivs) { ids.add(d.output_file_id); d.input_file_ids.forEach((i) => ids.add(i)); }
    for (const fid of ids) nodes.push({ key: fid, col: fileDepth(fid), kind: "file", label: files.has(fid) ? files.get(fid).file_name : "(a file you may not read)", sub: files.has(fid) ? files.get(fid).sha256.slice(0, 12) + "…" : "" });
    for (const d of derivs) nodes.push({ key: d.id, col: fileDepth(d.output_file_id) - 1, kind: "step", label: d.software + " " + d.software_version, sub: "derivation" });
    const cols = new Map();
    for (const n of nodes) { if (!cols.has(n.col)) cols.set(n.col, []); n.row = cols.get(n.col).length; cols.get(n.col).push(n); }
    const W = 190, H = 64, gapX = 50, gapY = 18;
    const pos = new Map(nodes.map((n) => [n.key, { x: 10 + n.col * (W + gapX), y: 10 + n.row * (H + gapY) }]));
    const width = 20 + (Math.max(...nodes.map((n) => n.col)) + 1) * (W + gapX);
    const height = 20 + Math.max(...Array.from(cols.values(), (c) => c.length)) * (H + gapY);
    const svg = document.createElementNS(SVG, "svg");
    svg.setAttribute("viewBox", "0 0 " + width + " " + height);
    svg.setAttribute("role", "img");
    svg.setAttribute("aria-label", "Lineage of " + (files.get(id) || { file_name: "the file" }).file_name + ": " + derivs.length + " derivations, " + ids.size + " files");
    const mk = (tag, attrs, text) => { const e = document.createElementNS(SVG, tag); for (const [k, v] of Object.entries(attrs)) e.setAttribute(k, v); if (text) e.textContent = text; return e; };
    const edge = (a, b) => { const p = pos.get(a), q = pos.get(b); svg.append(mk("path", { class: "edge", d: `M${p.x + W},${p.y + H / 2} C${p.x + W + gapX / 2},${p.y + H / 2} ${q.x - gapX / 2},${q.y + H / 2} ${q.x},${q.y + H / 2}` })); };
    for (const d of derivs) { d.input_file_ids.forEach((i) => edge(i, d.id)); edge(d.id, d.output_file_id); }
    for (const n of nodes) {
      const p = pos.get(n.key);
      const g = mk("g", { class: "node " + n.kind + (n.key === id ? " focus" : "") });
      g.append(mk("rect", { x: p.x, y: p.y, width: W, height: H, rx: n.kind === "step" ? 20 : 4 }),
        mk("text", { x: p.x + 10, y: p.y + 26 }, n.label.length > 26 ? n.label.slice(0, 25) + "…" : n.label),
        mk("text", { x: p.x + 10, y: p.y + 46, class: "sub" }, n.sub));
      svg.append(g);
    }
    box.replaceChildren(svg);
    $("#lineage-note").textContent = derivs.length ? "Sources on the left, products on the right; rounded boxes are processing steps." : "This file was neither derived from nor used to derive another file.";
  }

  document.addEventListener("DOMContentLoaded", () => {
    const drop = $("#drop"), input = $("#up-files");
    const take = (list) => { for (const f of list) send(f); };
    input.addEventListener("change", () => { take(input.files); input.value = ""; });
    drop.addEventListener("dragover", (ev) => { ev.preventDefault(); drop.classList.add("over"); });
    drop.addEventListener("dragleave", () => drop.classList.remove("over"));
    drop.addEventListener("drop", (ev) => { ev.preventDefault(); drop.classList.remove("over"); take(ev.dataTransfer.files); });
    drop.addEventListener("keydown", (ev) => { if (ev.key === "Enter" || ev.key === " ") { ev.preventDefault(); input.click(); } });
    listFiles();
    const sel = $("#lineage-panel").dataset.selected;
    if (sel) lineage(sel);
  });
})();
