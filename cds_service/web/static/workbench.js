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
      $("patient-title").scrollIntoView({ block: "nearest", behavior: "smooth" });
    } catch (e) {
      showProblem(String(e.message || e));
    } finally {
      btn.disabled = false;
    }
  }

  // Errors appear at the top of the record panel, where the eye is, and are announced once.
  function showProblem(text) {
    const box = $("problem");
    box.textContent = text;
    box.hidden = false;
    setStatus("");
  }

  function clearProblem() {
    $("problem").hidden = true;
    $("problem").textContent = "";
  }

  function issues(body, fallback) {
    return body && body.issue ? body.issue.map((i) => i.diagnostics).join("; ") : String(fallback);
  }

  async function postJson(url, body) {
    const r = await fetch(url, {
      method: "POST", headers: { "Content-Type": "application/json" }, body: JSON.stringify(body),
    });
    const parsed = await r.json().catch(() => null);
    return { ok: r.ok, status: r.status, body: parsed };
  }

  async function send() {
    clearProblem();
    let body;
    try {
      body = JSON.parse($("request-body").value);
    } catch (e) {
      $("own-record").open = true;
      showProblem(`The request is not valid JSON: ${e.message}`);
      return;
    }
    if (body && body.resourceType === "Bundle" && !body.hook) {
      const hook = SERVICE_HOOK[$("service").value] || "patient-view";
      setStatus(`Building a ${hook} request from the Bundle…`);
      const built = await postJson(`/workbench/request?hook=${encodeURIComponent(hook)}`, body);
      if (!built.ok || !built.body) {
        showProblem(`The Bundle could not become a request: ${issues(built.body, built.status)}`);
        return;
      }
      body = built.body;
      $("request-body").value = JSON.stringify(body, null, 2);
    }
    const service = $("service").value || HOOK_SERVICE[body && body.hook];
    if (!service) {
      showProblem("Choose a service: the request has no hook this service knows.");
      return;
    }
    const headers = { "Content-Type": "application/json", Accept: "application/json" };
    const token = $("token").value.trim();
    if (token) headers.Authorization = `Bearer ${token}`;
    const sent = JSON.stringify(body, null, 2);
    $("request-json").textContent = sent;
    setStatus(`Evaluating with ${service}…`);
    $("send").disabled = true;
    const t0 = performance.now();
    let response, text;
    try {
      response = await fetch(`/cds-services/${encodeURIComponent(service)}`, {
        method: "POST", headers, body: sent,
      });
      text = await response.text();
    } catch (e) {
      showProblem(`The service could not be reached: ${e.message}`);
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
    const understood = await postJson("/workbench/understand", body);
    if (understood.ok && understood.body) showRecord(understood.body);
    else showRecord(null, issues(understood.body, understood.status));
    if (!response.ok) {
      showProblem(`The service answered HTTP ${response.status}: ${issues(parsed, text)}`);
      $("cards").replaceChildren(el("p", { class: "muted",
        text: `No cards: the call failed with HTTP ${response.status}.` }));
      return;
    }
    const cards = (parsed && parsed.cards) || [];
    setStatus(`${cards.length} card${cards.length === 1 ? "" : "s"} in ${ms.toFixed(0)} ms.`);
    await showCards(cards, understood.ok ? understood.body : null);
  }

  // ---- the record ----------------------------------------------------------------------

  const LOCAL = new Intl.DateTimeFormat(undefined, {
    day: "2-digit", month: "short", hour: "2-digit", minute: "2-digit",
  });
  const fmtTime = (iso) => (iso ? LOCAL.format(new Date(iso)) : "");
  const fmtValue = (r) => {
    if (r.value === null || r.value === undefined) return r.raw || "";
    const v = Math.round(r.value * 100) / 100;
    return `${v} ${UNIT_TEXT[r.unit] ?? r.unit ?? ""}`.trim();
  };
  const UNIT_TEXT = { "mosm/kg": "mOsm/kg", "m[IU]/L": "mIU/L", "ug/dL": "µg/dL", "1": "" };

  function patientLine(data) {
    const p = data.patient;
    if (!p.known) return "Patient: age and sex could not be checked (no readable Patient resource).";
    const sex = p.sex === "unknown" ? "sex not recorded" : p.sex;
    const age = p.age_years === null ? "age not recorded" : `${p.age_years} years`;
    return `Patient: ${age}, ${sex} · evaluated ${fmtTime(data.now)} (${data.hook})`;
  }

  function showRecord(data, why) {
    const box = $("record");
    if (!data) {
      $("patient-facts").textContent = "";
      box.replaceChildren(el("p", { class: "muted",
        text: `The record could not be read${why ? ": " + why : ""}.` }));
      return;
    }
    $("patient-facts").textContent = patientLine(data);
    const labs = data.results.filter((r) => r.analyte);
    const other = data.results.filter((r) => !r.analyte && !r.resource.startsWith("Patient/"));
    const used = data.results.filter((r) => r.used).length;
    const summary = el("p", { class: "record-count",
      text: `${used} used, ${data.results.length - used} ignored.` });
    box.replaceChildren(summary, timeline(labs, data.now), labTable(labs));
    if (other.length) box.append(otherTable(other));
    const gaps = Object.entries(data.unavailable || {});
    if (gaps.length) {
      box.append(el("p", { class: "hint", text: "Not in the request: " +
        gaps.map(([k, v]) => `${k} (${v})`).join("; ") }));
    }
  }

  // One lane per test, results placed by time: a quick picture of what was drawn when.
  function timeline(labs, nowIso) {
    const timed = labs.filter((r) => r.time);
    const wrap = el("figure", { class: "timeline" });
    if (!timed.length) return wrap;
    const times = timed.map((r) => Date.parse(r.time));
    const now = Date.parse(nowIso);
    const lo = Math.min(...times);
    const hi = Math.max(now, ...times);
    const span = Math.max(hi - lo, 3600e3);
    const lanes = new Map();
    for (const r of timed) {
      if (!lanes.has(r.label)) lanes.set(r.label, []);
      lanes.get(r.label).push(r);
    }
    for (const [label, items] of lanes) {
      const track = el("div", { class: "lane-track" });
      for (const r of items) {
        const left = ((Date.parse(r.time) - lo) / span) * 96 + 2;
        const chip = el("span", {
          class: `chip ${r.used ? "used" : "ignored"}`,
          "data-source": r.resource,
          style: `left:${left.toFixed(2)}%`,
          title: `${label} ${fmtValue(r)} at ${fmtTime(r.time)}: ` +
            (r.used ? "used" : `ignored (${r.reason})`) + (r.used && r.reason ? ` (${r.reason})` : ""),
          text: r.value === null || r.value === undefined ? "–" : String(Math.round(r.value * 10) / 10),
        });
        track.append(chip);
      }
      wrap.append(el("div", { class: "lane" }, el("span", { class: "lane-label", text: label }), track));
    }
    wrap.append(el("figcaption", { class: "hint",
      text: `From ${fmtTime(new Date(lo).toISOString())} to ${fmtTime(new Date(hi).toISOString())}` +
        " (your browser's time zone). Solid: used; dashed: ignored. The table below says why." }));
    return wrap;
  }

  function labTable(labs) {
    const rows = [...labs].sort((a, b) => (a.time || "").localeCompare(b.time || ""));
    const tbody = el("tbody");
    for (const r of rows) {
      tbody.append(el("tr", { class: r.used ? "used" : "ignored", "data-source": r.resource },
        el("td", { text: fmtTime(r.time), title: r.time || "" }),
        el("td", { text: r.label }),
        el("td", { class: "num", text: fmtValue(r), title: r.raw ? `sent as ${r.raw}` : "" }),
        el("td", {}, el("span", { class: `use-badge ${r.used ? "used" : "ignored"}`,
          text: r.used ? "used" : "ignored" })),
        el("td", { text: r.reason || "" }),
      ));
    }
    return el("table", { class: "record-table" },
      el("caption", { text: "Results, oldest first" }),
      el("thead", {}, el("tr", {}, ...["Time", "Test", "Value", "Used", "Why / note"].map(
        (h) => el("th", { scope: "col", text: h })))),
      tbody);
  }

  function otherTable(other) {
    const tbody = el("tbody");
    for (const r of other) {
      tbody.append(el("tr", { class: r.used ? "used" : "ignored", "data-source": r.resource },
        el("td", { text: r.understood_as }),
        el("td", {}, el("span", { class: `use-badge ${r.used ? "used" : "ignored"}`,
          text: r.used ? "used" : "ignored" })),
        el("td", { text: r.reason || "" }),
      ));
    }
    return el("table", { class: "record-table" },
      el("caption", { text: "Medications, problems and orders" }),
      el("thead", {}, el("tr", {}, ...["Understood as", "Used", "Why / note"].map(
        (h) => el("th", { scope: "col", text: h })))),
      tbody);
  }

  // ---- the cards -----------------------------------------------------------------------

  async function renderDetails(cards) {
    const texts = cards.map((c) => c.detail || "");
    if (!texts.some((t) => t)) return texts;
    try {
      const r = await postJson("/workbench/render", { texts });
      if (r.ok && r.body) return r.body.html;
    } catch (e) { /* fall back to text */ }
    return null;
  }

  async function showCards(cards, understood) {
    const box = $("cards");
    if (!cards.length) {
      const reason = understood && understood.reason ? ` ${understood.reason}` : "";
      box.replaceChildren(el("p", { class: "muted",
        text: `No cards: nothing to say for this request.${reason}` }));
      return;
    }
    const html = await renderDetails(cards);
    const restsOn = (understood && understood.findings) || {};
    box.replaceChildren(...cards.map((c, i) => cardNode(c, html ? html[i] : null, restsOn)));
  }

  function mark(sources) {
    for (const n of document.querySelectorAll("#record [data-source]")) {
      n.classList.toggle("rests-on", sources.has(n.getAttribute("data-source")));
    }
  }

  function cardNode(card, detailHtml, restsOn) {
    const ind = ["critical", "warning", "info"].includes(card.indicator) ? card.indicator : "info";
    const topic = card.source && card.source.topic ? card.source.topic.code : "";
    const sources = new Set(restsOn[topic] || []);
    const details = el("details", { class: "card-body" },
      el("summary", {},
        el("span", { class: "indicator-badge", text: INDICATOR_TEXT[ind] }),
        el("h3", { text: card.summary || "" }),
      ),
    );
    const node = el("article", { class: `card ${ind}`, "data-topic": topic }, details);
    details.append(el("p", { class: "card-source",
      text: `${(card.source && card.source.label) || ""}${topic ? " · " + topic : ""}` +
        (sources.size ? ` · rests on ${sources.size} result${sources.size === 1 ? "" : "s"}` : "") }));
    details.addEventListener("toggle", () => {
      if (details.open) {
        for (const other of document.querySelectorAll("#cards details.card-body")) {
          if (other !== details) other.open = false;
        }
        mark(sources);
      } else if (!document.querySelector("#cards details.card-body[open]")) {
        mark(new Set());
      }
    });
    if (card.detail) {
      const d = el("div", { class: "card-detail" });
      if (detailHtml !== null && detailHtml !== undefined) d.innerHTML = detailHtml;
      else d.append(el("pre", { text: card.detail }));
      details.append(d);
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
      details.append(row, result);
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
      details.append(row);
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
      clearProblem();
      $("patient-facts").textContent = "";
      $("record").replaceChildren(el("p", { class: "muted",
        text: "Open a patient, or evaluate a request of your own." }));
      showCards([], null);
    });
    $("upload").addEventListener("change", async (ev) => {
      const f = ev.target.files && ev.target.files[0];
      if (!f) return;
      $("request-body").value = await f.text();
      setStatus(`Loaded ${f.name}. Press “Evaluate”.`);
    });
    loadSamples();
  }

  if (document.readyState === "loading") document.addEventListener("DOMContentLoaded", init);
  else init();
})();
