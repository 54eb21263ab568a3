// Ledger: the tree's head, the facility's verifier key, and the signed checkpoints,
// each signature checked here with WebCrypto's Ed25519 against the verifier key.
"use strict";
(function () {
  const $ = (s) => document.querySelector(s);
  const b64 = (s) => Uint8Array.from(atob(s), (c) => c.charCodeAt(0));
  const hex = (a) => Array.from(a, (b) => b.toString(16).padStart(2, "0")).join("");
  let key = null; // { name, hash (4 bytes hex), pub (CryptoKey) }

  // The verifier key is "name+hash+base64(0x01 ‖ 32-byte Ed25519 public key)".
  async function loadKey(text) {
    // The base64 part may itself hold "+": cut at the first two only.
    const i = text.indexOf("+"), j = text.indexOf("+", i + 1);
    if (i < 0 || j < 0) return null;
    const name = text.slice(0, i), hash = text.slice(i + 1, j);
    const raw = b64(text.slice(j + 1));
    if (raw[0] !== 1 || raw.length !== 33) return null;
    try {
      const pub = await crypto.subtle.importKey("raw", raw.slice(1), { name: "Ed25519" }, false, ["verify"]);
      return { name, hash, pub };
    } catch (_) {
      return { name, hash, pub: null };
    }
  }

  // check verifies a signed note: the text up to the blank line, signed by a line
  // "— name base64(key hash ‖ signature)".
  async function check(note) {
    if (!key || !key.pub) return "not checked: this browser lacks Ed25519";
    const cut = note.indexOf("\n\n");
    if (cut < 0) return "malformed note";
    const text = new TextEncoder().encode(note.slice(0, cut + 1));
    for (const line of note.slice(cut + 2).split("\n")) {
      const m = /^\u2014 (\S+) (\S+)$/.exec(line);
      if (!m || m[1] !== key.name) continue;
      const sig = b64(m[2]);
      if (hex(sig.slice(0, 4)) !== key.hash) continue;
      const ok = await crypto.subtle.verify("Ed25519", key.pub, sig.slice(4), text);
      return ok ? "valid, by " + key.name : "DOES NOT VERIFY";
    }
    return "no signature by " + key.name;
  }

  async function show() {
    const err = $("#led-error");
    const [head, k] = await Promise.all([BL.api("/api/v1/ledger"), BL.api("/api/v1/ledger/key")]);
    if (!head.ok || !k.ok) { BL.showError(err, (head.ok ? k : head).body); return; }
    const h = head.body;
    $("#led-head").textContent = h.size + " events sealed" + (h.sealed_at ? " (last seal " + BL.when(h.sealed_at) + ")" : "") +
      "; " + h.unsealed + " waiting to be sealed" + (h.oldest_unsealed ? " since " + BL.when(h.oldest_unsealed) : "") + ".";
    $("#led-key").textContent = k.body.verifier_key;
    key = await loadKey(k.body.verifier_key);
    const list = await BL.api("/api/v1/ledger/checkpoints?limit=1000&after=" + Math.max(0, h.size - 2000));
    if (!list.ok) { BL.showError(err, list.body); return; }
    const items = list.body.items.slice().reverse().slice(0, 50);
    const rows = [];
    for (const c of items) {
      const state = await check(c.note);
      rows.push(BL.el("tr", { class: state.startsWith("valid") ? "" : "bad" }, BL.el("td", { class: "num", text: String(c.size) }),
        BL.el("td", {}, BL.el("code", { text: hex(b64(c.root)).slice(0, 16) + "…" })), BL.el("td", { text: BL.when(c.signed_at) }),
        BL.el("td", { class: "sig", text: state })));
    }
    $("#led-list tbody").replaceChildren(...rows);
    if (!rows.length) $("#led-list tbody").replaceChildren(BL.el("tr", {}, BL.el("td", { colspan: "4", class: "empty", text: "No checkpoint signed yet." })));
    document.body.dataset.ledgerReady = "true";
  }

  document.addEventListener("DOMContentLoaded", () => {
    const sign = $("#led-sign");
    if (sign) {
      sign.addEventListener("click", async () => {
        const r = await BL.api("/api/v1/ledger/checkpoints", { method: "POST" });
        if (!r.ok) { BL.showError($("#led-error"), r.body); return; }
        $("#led-error").replaceChildren();
        delete document.body.dataset.ledgerReady;
        await show();
      });
    }
    show();
  });
})();
