// Tonicity workbench: list samples, send a CDS Hooks request to this service, show the cards.
// Everything is built with textContent; only card detail goes through innerHTML, and only as
// rendered by the server (markdown-it with raw HTML off).
"use strict";

(function () {
  const HOOK_SERVICE = {
    "patient-view": "sodium-workup",
    "order-select": "sodium-order-select",
    "order-sign": "sodium-order-sign",
  };
  const SERVICE_HOOK = Object.fromEntries(Object.entries(HOOK_SERVICE).map(([h, s]) => [s, h]));
  const INDICATOR_TEXT = { critical: "Critical", warning: "Warning", info: "Info" };

  const $ = (id) => document.getElementById(id);
  const el = (tag, attrs, ...children) => {
    const node = document.createElement(tag);
    for (const [k, v] of Object.entries(attrs || {})) {
      if (k === "class") node.className = v;
      else if (k === "text") node.textContent = v;
      else node.setAttribute(k, v);
    }
    for (const c of children) if (c) node.append(c);
    return node;
  };

  function setStatus(text, isError) {
    const s = $("status");
    s.textContent = text;
    s.classList.toggle("error", !!isError);
  }

  async function getJson(url) {
    const r = await fetch(url, { headers: { Accept: "application/json" } });
    const body = await r.json().catch(() => null);
    if (!r.ok) {
      const msg = body && body.issue ? body.issue.map((i) => i.diagnostics).join("; ") : r.statusText;
      throw new Error(`${url}: ${r.status} ${msg}`);
    }
    return body;
  }

  async function loadSamples() {
    const list = $("sample-list");
    let data;
    try {
      data = await getJson("/workbench/samples");
    } catch (e) {
      list.replaceChildren(el("li", { class: "muted", text: "Samples could not be listed." }));
      return;
    }
    if (!data.samples.length) {
      list.replaceChildren(el("li", { class: "muted", text: "No sample files found." }));
      return;
    }
    // One entry per story: its hook request and its Bundle side by side.
    const groups = new Map();
    for (const s of data.samples) {
      const key = `${s.hook || ""}|${s.story || s.name}`;
      if (!groups.has(key)) groups.set(key, []);
      groups.get(key).push(s);
    }
    list.replaceChildren(
      ...[...groups.values()].map((items) => {
        const first = items[0];
        const buttons = el("div", { class: "sample-buttons" });
        for (const s of items) {
          const kind = s.kind === "request" ? "Request" : "Bundle";
          const btn = el("button", { type: "button", text: `Run ${kind.toLowerCase()}`,
            "data-sample": s.name, title: s.name });
          btn.setAttribute("aria-label", `Run ${kind.toLowerCase()} ${s.name}`);
          btn.addEventListener("click", () => runSample(s, btn));
          buttons.append(btn);
        }
        return el(
          "li",
          { class: "sample" },
          el("p", { class: "sample-story", text: first.story || first.name }),
          el("div", { class: "sample-meta", text: `${first.hook || "hook from file"} · ` +
            items.map((s) => s.name.split("/").pop()).join(", ") }),
          buttons,
        );
      }),
    );
  }

  async function runSample(sample, btn) {
    for (const b of document.querySelectorAll(".sample-buttons button")) {
      b.removeAttribute("aria-current");
    }
    btn.setAttribute("aria-current", "true");
    btn.disabled = true;
    setStatus(`Preparing ${sample.name}…`);
    try {
      const q = sample.hook ? `?hook=${encodeURIComponent(sample.hook)}` : "";
      const req = await getJson(`/workbench/request/${encodeURI(sample.name)}${q}`);
      $("request-body").value = JSON.stringify(req, null, 2);
      $("service").value = "";
      await send();
      $("cards-title").scrollIntoView({ block: "nearest", behavior: "smooth" });
    } catch (e) {
      setStatus(String(e.message || e), true);
    } finally {
      btn.disabled = false;
    }
  }

  async function send() {
    let body;
    try {
      body = JSON.parse($("request-body").value);
    } catch (e) {
      setStatus(`The request is not valid JSON: ${e.message}`, true);
      return;
    }
    if (body && body.resourceType === "Bundle" && !body.hook) {
      const hook = SERVICE_HOOK[$("service").value] || "patient-view";
      setStatus(`Building a ${hook} request from the Bundle…`);
      const r = await fetch(`/workbench/request?hook=${encodeURIComponent(hook)}`, {
        method: "POST", headers: { "Content-Type": "application/json" }, body: JSON.stringify(body),
      });
      const built = await r.json().catch(() => null);
      if (!r.ok || !built) {
        const why = built && built.issue ? built.issue.map((i) => i.diagnostics).join("; ") : r.status;
        setStatus(`The Bundle could not become a request: ${why}`, true);
        return;
      }
      body = built;
      $("request-body").value = JSON.stringify(body, null, 2);
    }
    const service = $("service").value || HOOK_SERVICE[body && body.hook];
    if (!service) {
      setStatus("Choose a service: the request has no hook this service knows.", true);
      return;
    }
    const headers = { "Content-Type": "application/json", Accept: "application/json" };
    const token = $("token").value.trim();
    if (token) headers.Authorization = `Bearer ${token}`;
    const sent = JSON.stringify(body, null, 2);
    $("request-json").textContent = sent;
    setStatus(`Sending to ${service}…`);
    $("send").disabled = true;
    const t0 = performance.now();
    let response, text;
    try {
      response = await fetch(`/cds-services/${encodeURIComponent(service)}`, {
        method: "POST", headers, body: sent,
      });
      text = await response.text();
    } catch (e) {
      setStatus(`The service could not be reached: ${e.message}`, true);
      return;
    } finally {
      $("send").disabled = false;
    }
    const ms = performance.now() - t0;
    $("timing").textContent = `POST /cds-services/${service} → HTTP ${response.status} ` +
      `in ${ms.toFixed(0)} ms`;
    let parsed = null;
    try { parsed = JSON.parse(text); } catch (e) { /* shown as text */ }
    $("response-json").textContent = parsed ? JSON.stringify(parsed, null, 2) : text;
    if (!response.ok) {
      const why = parsed && parsed.issue ? parsed.issue.map((i) => i.diagnostics).join("; ") : "";
      setStatus(`The service answered ${response.status}. ${why}`, true);
      $("cards").replaceChildren(el("p", { class: "status error", role: "alert",
        text: `No cards: the call failed with HTTP ${response.status}. ${why}` }));
      return;
    }
    const cards = (parsed && parsed.cards) || [];
    setStatus(`${cards.length} card${cards.length === 1 ? "" : "s"} in ${ms.toFixed(0)} ms.`);
    await showCards(cards);
  }

  async function renderDetails(cards) {
    const texts = cards.map((c) => c.detail || "");
    if (!texts.some((t) => t)) return texts;
    try {
      const r = await fetch("/workbench/render", {
        method: "POST",
        headers: { "Content-Type": "application/json" },
        body: JSON.stringify({ texts }),
      });
      if (r.ok) return (await r.json()).html;
    } catch (e) { /* fall back to text */ }
    return null;
  }

  async function showCards(cards) {
    const box = $("cards");
    if (!cards.length) {
      box.replaceChildren(el("p", { class: "muted", text: "No cards: nothing to say for this request." }));
      return;
    }
    const html = await renderDetails(cards);
    box.replaceChildren(...cards.map((c, i) => cardNode(c, html ? html[i] : null)));
  }

  function cardNode(card, detailHtml) {
    const ind = ["critical", "warning", "info"].includes(card.indicator) ? card.indicator : "info";
    const topic = card.source && card.source.topic ? card.source.topic.code : "";
    const node = el(
      "article",
      { class: `card ${ind}`, "data-topic": topic },
      el(
        "div",
        { class: "card-head" },
        el("span", { class: "indicator-badge", text: INDICATOR_TEXT[ind] }),
        el("span", {
          class: "card-source",
          text: `${(card.source && card.source.label) || ""}${topic ? " · " + topic : ""}`,
        }),
      ),
      el("h3", { text: card.summary || "" }),
    );
    if (card.detail) {
      const d = el("div", { class: "card-detail" });
      if (detailHtml !== null && detailHtml !== undefined) d.innerHTML = detailHtml;
      else d.append(el("pre", { text: card.detail }));
      node.append(d);
    }
    if (card.suggestions && card.suggestions.length) {
      const result = el("pre", { class: "suggestion-result", hidden: "" });
      const row = el("div", { class: "card-suggestions" });
      for (const s of card.suggestions) {
        const b = el("button", { type: "button", text: s.label || "Suggestion" });
        if (s.isRecommended) b.classList.add("primary");
        b.addEventListener("click", () => {
          const acts = (s.actions || []).map((a) => ({
            type: a.type, description: a.description,
            resource: a.resource ? a.resource.resourceType : a.resourceId,
          }));
          result.textContent = `Accepting "${s.label}" would ask the record system to:\n` +
            JSON.stringify(acts, null, 2);
          result.hidden = false;
        });
        row.append(b);
      }
      node.append(row, result);
    }
    if (card.links && card.links.length) {
      const row = el("div", { class: "card-links" });
      for (const l of card.links) {
        if (l.type === "absolute" && /^https?:\/\//i.test(l.url || "")) {
          row.append(el("a", { href: l.url, target: "_blank", rel: "noopener noreferrer",
            text: l.label || l.url }));
        } else {
          row.append(el("span", { class: "muted",
            text: `${l.label || l.url} (SMART app link: not launched from the workbench)` }));
        }
      }
      node.append(row);
    }
    return node;
  }

  function init() {
    $("request-form").addEventListener("submit", (ev) => { ev.preventDefault(); send(); });
    $("clear").addEventListener("click", () => {
      $("request-body").value = "";
      $("request-json").textContent = "";
      $("response-json").textContent = "";
      $("timing").textContent = "";
      setStatus("");
      showCards([]);
    });
    $("upload").addEventListener("change", async (ev) => {
      const f = ev.target.files && ev.target.files[0];
      if (!f) return;
      $("request-body").value = await f.text();
      setStatus(`Loaded ${f.name}. Press “Send to the service”.`);
    });
    loadSamples();
  }

  if (document.readyState === "loading") document.addEventListener("DOMContentLoaded", init);
  else init();
})();
