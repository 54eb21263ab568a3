// Trace: find a data file by its SHA-256 (typed, or computed here from a dropped
// file), show its story, and check each ledger inclusion proof in the browser
// against the signed checkpoint's root (RFC 9162 §2.1.3.2), independently of the server.
"use strict";
(function () {
  const $ = (s) => document.querySelector(s);
  const b64 = (s) => Uint8Array.from(atob(s), (c) => c.charCodeAt(0));
  const hex = (buf) => Array.from(new Uint8Array(buf), (b) => b.toString(16).padStart(2, "0")).join("");
  const sha = async (...parts) => new Uint8Array(await crypto.subtle.digest("SHA-256", concat(...parts)));
  function concat(...parts) {
    const out = new Uint8Array(parts.reduce((n, p) => n + p.length, 0));
    let i = 0;
    for (const p of parts) { out.set(p, i); i += p.length; }
    return out;
  }
  const same = (a, b) => a.length === b.length && a.every((v, i) => v === b[i]);

  // verify checks an RFC 6962 audit path: the leaf's bytes hash to leaf_hash, and
  // the path leads from it to root, which must be the checkpoint's.
  async function verify(leafB64, p, root) {
    if (!leafB64 || !p || p.root !== root) return false;
    const leafHash = await sha(new Uint8Array([0]), b64(leafB64));
    if (!same(leafHash, b64(p.leaf_hash))) return false;
    let fn = p.index, sn = p.size - 1, r = leafHash;
    for (const s of p.proof || []) {
      const h = b64(s);
      if (sn === 0) return false;
      if (fn % 2 === 1 || fn === sn) {
        r = await sha(new Uint8Array([1]), h, r);
        while (fn % 2 === 0 && fn !== 0) { fn = Math.floor(fn / 2); sn = Math.floor(sn / 2); }
      } else {
        r = await sha(new Uint8Array([1]), r, h);
      }
      fn = Math.floor(fn / 2); sn = Math.floor(sn / 2);
    }
    return sn === 0 && same(r, b64(root));
  }

  function facts(dl, pairs) {
    dl.replaceChildren();
    for (const [k, v] of pairs) {
      if (v === undefined || v === null || v === "") continue;
      dl.append(BL.el("dt", { text: k }), BL.el("dd", { text: String(v) }));
    }
  }

  async function show(digest) {
    const err = $("#trace-error");
    err.replaceChildren();
    const r = await BL.api("/api/v1/trace/" + digest);
    if (!r.ok) { BL.showError(err, r.body); $("#trace-out").hidden = true; return; }
    const t = r.body;
    history.replaceState(null, "", "/trace?sha256=" + digest);
    facts($("#trace-file-facts"), [["Name", t.file.file_name], ["SHA-256", t.sha256], ["Size", BL.bytes(t.file.size_bytes)],
      ["Media type", t.file.media_type], ["Stored", BL.when(t.file.stored_at || t.file.created_at)], ["Other records of these bytes", t.other_records.length || ""]]);
    const a = t.acquisition;
    facts($("#trace-acq"), a ? [["Started", BL.when(a.started_at)], ["Ended", BL.when(a.ended_at)], ["Version in force", a.version + " of " + a.versions.length],
      ["Notes", a.notes], ["Warnings", (a.warnings || []).join("; ")],
      ["Specimen", t.specimen ? t.specimen.code + (t.specimen.fluence_budget_e_per_angstrom2 !== undefined ? " (fluence " + Math.round(t.specimen.fluence_before_e_per_angstrom2) +
        " → " + Math.round(t.specimen.fluence_after_e_per_angstrom2) + " e⁻/Å² of a budget of " + t.specimen.fluence_budget_e_per_angstrom2 + (t.specimen.over_budget_after ? ", over budget" : "") + ")" : "") : ""]]
      : [["Processed file", "made by a derivation, not recorded at an instrument"]]);
    facts($("#trace-instr"), [["Instrument", t.instrument ? t.instrument.code + " — " + t.instrument.name : ""],
      ["Corrector tuning", t.tuning ? BL.when(t.tuning.measured_at) + ": " + t.tuning.coefficients.map((c) => c.name + " " + c.text).join(", ") : "none on record"],
      ["Calibrations in force", t.calibrations.map((c) => c.kind + (c.subject ? " " + c.subject : "") + " from " + BL.when(c.effective_from)).join("; ") || "none"]]);
    const person = (p) => (p ? p.display_name + " (" + p.role + ")" : "");
    facts($("#trace-people"), [["Project", t.project.code + " — " + t.project.title], ["Operator", person(t.operator)], ["Booked by", person(t.booked_user)],
      ["Booking", t.booking ? t.booking.kind + ", " + BL.when(t.booking.start) + " – " + BL.when(t.booking.end, false) : ""]]);
    const tb = $("#trace-conditions tbody");
    tb.replaceChildren();
    $("#trace-conditions").closest("section").hidden = !a;
    if (a) {
      for (const [k, v] of Object.entries(a.conditions || {})) {
        if (typeof v === "object") continue;
        tb.append(BL.el("tr", {}, BL.el("th", { scope: "row", text: k.replaceAll("_", " ") }), BL.el("td", { text: String(v) })));
      }
      for (const [k, v] of Object.entries(a.derived || {})) {
        if (typeof v !== "number" && typeof v !== "string") continue;
        if (k === "constants") continue;
        tb.append(BL.el("tr", { class: "derived" }, BL.el("th", { scope: "row", text: k.replaceAll("_", " ") + " (derived)" }), BL.el("td", { text: String(v) })));
      }
    }
    const names = new Map([[t.file.id, t.file.file_name], ...t.files.map((f) => [f.id, f.file_name])]);
    const nm = (id) => names.get(id) || "a file you may not read";
    $("#trace-derivations").replaceChildren(...[...t.upstream.map((d) => ["from", d]), ...t.downstream.map((d) => ["into", d])].map(([dir, d]) =>
      BL.el("li", { text: (dir === "from" ? "Made from " : "Used for ") + d.input_file_ids.map(nm).join(", ") + " → " + nm(d.output_file_id) +
        " by " + d.software + " " + d.software_version + ", " + BL.when(d.performed_at) })));
    if (!t.upstream.length && !t.downstream.length) $("#trace-derivations").replaceChildren(BL.el("li", { text: "No derivations: nothing was made from this file, and it was made from nothing else." }));

    const cp = t.ledger.checkpoint;
    let events = 0, sealed = 0, valid = 0;
    const items = [];
    for (const rec of t.ledger.records) {
      for (const e of rec.events) {
        events++;
        let state = "not yet sealed";
        if (e.sealed && cp) {
          sealed++;
          const ok = await verify(e.leaf, e.proof, cp.root);
          if (ok) valid++;
          state = ok ? "sealed, proof valid" : "sealed, PROOF DOES NOT CHECK";
        }
        items.push(BL.el("li", { class: e.sealed ? "" : "note" }, rec.entity_type + " " + e.action + " · " + BL.when(e.at) + " · " + state));
      }
    }
    $("#trace-proofs").replaceChildren(...items);
    $("#trace-ledger").textContent = cp
      ? sealed + " of " + events + " ledger events sealed; " + valid + " of " + sealed + " inclusion proofs checked in this browser against checkpoint " +
        cp.size + " (root " + hex(b64(cp.root)).slice(0, 16) + "…), signed by " + t.ledger.key_name + " on " + BL.when(cp.signed_at) + "."
      : "No signed checkpoint yet: the " + events + " ledger events are recorded but not sealed.";
    $("#trace-ledger").classList.toggle("error", sealed > valid);
    $("#trace-bundle").href = "/api/v1/trace/" + digest + "/bundle";
    $("#trace-out").hidden = false;
  }

  async function hashFile(file) {
    $("#trace-error").replaceChildren(BL.el("p", { class: "note", text: "Computing the SHA-256 of " + file.name + "…" }));
    const d = hex(await crypto.subtle.digest("SHA-256", await file.arrayBuffer()));
    $("#trace-digest").value = d;
    await show(d);
  }

  document.addEventListener("DOMContentLoaded", () => {
    $("#trace-form").addEventListener("submit", (ev) => {
      ev.preventDefault();
      const d = $("#trace-digest").value.trim().toLowerCase();
      if (!/^[0-9a-f]{64}$/.test(d)) {
        BL.showError($("#trace-error"), { error: { message: "A SHA-256 is 64 hexadecimal digits.", fields: { sha256: "must be 64 hexadecimal digits" } } });
        return;
      }
      show(d);
    });
    const drop = $("#trace-drop"), input = $("#trace-file");
    input.addEventListener("change", () => { if (input.files[0]) hashFile(input.files[0]); input.value = ""; });
    drop.addEventListener("dragover", (ev) => { ev.preventDefault(); drop.classList.add("over"); });
    drop.addEventListener("dragleave", () => drop.classList.remove("over"));
    drop.addEventListener("drop", (ev) => { ev.preventDefault(); drop.classList.remove("over"); if (ev.dataTransfer.files[0]) hashFile(ev.dataTransfer.files[0]); });
    drop.addEventListener("keydown", (ev) => { if (ev.key === "Enter" || ev.key === " ") { ev.preventDefault(); input.click(); } });
    if (/^[0-9a-f]{64}$/.test($("#trace-digest").value)) show($("#trace-digest").value);
  });
})();
