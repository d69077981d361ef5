// onrecord's page. Every piece of text from the documents, the answer or the
// server is placed with textContent or as an option's text: this script
// never builds HTML from strings, so markup inside a record stays text.
"use strict";

(function () {
  const $ = (id) => document.getElementById(id);

  // Builds an element with text children; never parses HTML.
  function el(tag, attrs, ...children) {
    const e = document.createElement(tag);
    for (const [k, v] of Object.entries(attrs || {})) {
      if (k === "class") e.className = v;
      else if (k === "text") e.textContent = v;
      else e.setAttribute(k, v);
    }
    for (const c of children) {
      if (c === null || c === undefined) continue;
      e.append(c instanceof Node ? c : document.createTextNode(String(c)));
    }
    return e;
  }

  function show(node, yes) {
    node.hidden = !yes;
  }

  function clear(node) {
    while (node.firstChild) node.removeChild(node.firstChild);
  }

  // The error message a JSON error body carries, else the status line.
  async function errorOf(resp) {
    try {
      const body = await resp.json();
      if (body && body.error && body.error.message) return body.error.message;
    } catch (_) {
      /* not JSON */
    }
    return `The server answered ${resp.status} ${resp.statusText}.`;
  }

  function pagesLabel(c) {
    return c.end_page && c.end_page !== c.page ? `pp. ${c.page}-${c.end_page}` : `p. ${c.page}`;
  }

  const state = { answer: null, answerId: null, busy: false };

  // ---- The form: options from the index -------------------------------
  async function loadInfo() {
    const resp = await fetch("/api/info", { credentials: "same-origin" });
    if (!resp.ok) {
      $("index-summary").textContent = "The index could not be read: " + (await errorOf(resp));
      return;
    }
    const info = await resp.json();
    const c = info.counts;
    let summary = `${c.documents} documents, ${c.pages} pages in this index.`;
    if (info.dates && info.dates.first) summary += ` Dated ${info.dates.first} to ${info.dates.last}.`;
    $("index-summary").textContent = summary;
    $("version").textContent = info.onrecord_version;
    if (info.caution) $("caution-text").textContent = info.caution;
    for (const o of info.organisations) $("org").append(el("option", { value: o, text: o }));
    for (const d of info.documents) {
      const label = [d.title, d.date, d.organisation].filter(Boolean).join(" — ");
      $("doc").append(el("option", { value: d.doc_id, text: label }));
    }
    for (const r of info.retrievers) {
      const names = { hybrid: "BM25 and embeddings (hybrid)", bm25: "BM25 (the words typed)", dense: "Embeddings only" };
      $("retriever").append(el("option", { value: r, text: names[r] || r }));
    }
    for (const d of info.drafters) {
      const names = { extractive: "the records' own sentences (no model)", local: "the local model", remote: "the configured endpoint" };
      $("drafter").append(el("option", { value: d, text: names[d] || d }));
    }
    if (info.dates && info.dates.first && info.dates.first.length === 10) {
      $("from").min = $("to").min = info.dates.first;
      $("from").max = $("to").max = info.dates.last;
    }
    if (info.limits) $("question").maxLength = info.limits.max_question_chars;
    document.body.dataset.ready = "true";
  }

  function request() {
    const doc = $("doc").value;
    const n = parseInt($("passages").value, 10);
    return {
      question: $("question").value,
      passages: Number.isFinite(n) ? n : 10,
      retriever: $("retriever").value || undefined,
      drafter: $("drafter").value || undefined,
      filters: {
        from: $("from").value || undefined,
        to: $("to").value || undefined,
        org: $("org").value || undefined,
        docs: doc ? [doc] : [],
      },
    };
  }

  // ---- Asking: server-sent events over a POST --------------------------
  async function ask(ev) {
    ev.preventDefault();
    if (state.busy) return;
    const q = $("question").value.trim();
    show($("ask-error"), false);
    if (!q) {
      fail($("ask-error"), "Type a question first.");
      $("question").focus();
      return;
    }
    state.busy = true;
    $("ask").disabled = true;
    $("progress").textContent = "Sending the question…";
    clear($("draft-text"));
    show($("draft"), false);
    try {
      const resp = await fetch("/api/question/stream", {
        method: "POST",
        credentials: "same-origin",
        headers: { "Content-Type": "application/json", Accept: "text/event-stream" },
        body: JSON.stringify(request()),
      });
      if (!resp.ok) {
        fail($("ask-error"), await errorOf(resp));
        $("progress").textContent = "";
        return;
      }
      await readEvents(resp, onEvent);
    } catch (e) {
      fail($("ask-error"), "The connection to onrecord was lost: " + e.message);
      $("progress").textContent = "";
    } finally {
      state.busy = false;
      $("ask").disabled = false;
    }
  }

  // Reads a text/event-stream body and calls handle(event, data, id).
  async function readEvents(resp, handle) {
    const reader = resp.body.getReader();
    const decoder = new TextDecoder();
    let buf = "";
    for (;;) {
      const { value, done } = await reader.read();
      if (done) break;
      buf += decoder.decode(value, { stream: true });
      let cut;
      while ((cut = buf.indexOf("\n\n")) >= 0) {
        const block = buf.slice(0, cut);
        buf = buf.slice(cut + 2);
        let event = "message";
        let id = null;
        const data = [];
        for (const line of block.split("\n")) {
          if (line.startsWith(":")) continue;
          const i = line.indexOf(":");
          const field = i < 0 ? line : line.slice(0, i);
          let v = i < 0 ? "" : line.slice(i + 1);
          if (v.startsWith(" ")) v = v.slice(1);
          if (field === "event") event = v;
          else if (field === "data") data.push(v);
          else if (field === "id") id = v;
        }
        if (data.length) handle(event, data.join("\n"), id);
      }
    }
  }

  function onEvent(event, data, id) {
    const msg = JSON.parse(data);
    if (event === "stage") {
      $("progress").textContent = msg.message + "…";
    } else if (event === "draft") {
      show($("draft"), true);
      $("draft-text").append(document.createTextNode(msg.text));
    } else if (event === "answer") {
      $("progress").textContent = "Done.";
      show($("draft"), false);
      state.answer = msg;
      state.answerId = id;
      renderAnswer(msg, id);
    } else if (event === "error") {
      $("progress").textContent = "";
      fail($("ask-error"), msg.error ? msg.error.message : "The answer could not be made.");
    }
  }

  function fail(box, message) {
    box.textContent = message;
    show(box, true);
  }

  // ---- The answer: a ledger ------------------------------------------
  // Each verified sentence is a numbered claim; beneath it, for each of its
  // citations, the page's words, where they are (doc-id · p. N) and a button
  // that opens the page inside the claim, the quoted words marked.
  function whereLine(c) {
    const what = [c.title, c.organisation, c.date].filter(Boolean).join(", ");
    return el(
      "p",
      { class: "where" },
      el("span", { class: "ref", text: `${c.doc_id} · ${pagesLabel(c)}` }),
      el("span", { class: "what", text: " — " + what }),
    );
  }

  function ocrNote(c) {
    if (!c.ocr) return null;
    const low = c.ocr.low;
    const text = low
      ? `Low OCR confidence: ${Math.round(c.ocr.confidence)}% on this quote` +
        (c.ocr.weakest_conf < 50 ? ` (“${c.ocr.weakest_word}” ${Math.round(c.ocr.weakest_conf)}%)` : "") +
        ". Check the page image before quoting."
      : `This page was read by OCR; confidence ${Math.round(c.ocr.confidence)}% on this quote.`;
    return el("p", { class: low ? "ocr-note ocr-low" : "ocr-note", text });
  }

  function openButton(c, holder, sentence) {
    const b = el(
      "button",
      {
        type: "button",
        class: "open-page",
        "aria-expanded": "false",
        "aria-controls": "page-panel",
        "aria-label": `Open ${pagesLabel(c)} of ${c.title} here${sentence ? ", under the sentence it proves" : ""}`,
      },
      `Open ${pagesLabel(c)} here`,
    );
    b.addEventListener("click", () => openPage(c, holder, b));
    return b;
  }

  function evidence(c, claim, sentence) {
    const box = el(
      "div",
      { class: "evidence" },
      el("span", { class: "label", text: c.quoted_as ? "The page reads" : "Proof" }),
      el("blockquote", { class: "quote", text: c.quote }),
      whereLine(c),
    );
    if (c.quoted_as) box.append(el("p", { class: "drafted", text: `Drafted as: “${c.quoted_as}”` }));
    if (c.corrected_from) box.append(el("p", { class: "drafted", text: "The drafter cited another passage; the quote is here." }));
    const note = ocrNote(c);
    if (note) box.append(note);
    box.append(openButton(c, claim, sentence));
    return box;
  }

  function renderAnswer(a, id) {
    const list = $("answer");
    closePage(false);
    clear(list);
    clear($("struck-list"));
    show($("answer-empty"), false);
    $("answer-question").textContent = "Asked: " + a.question;
    show($("answer-question"), true);

    const supported = a.sentences.filter((s) => s.verdict === "supported");
    const struck = a.sentences.filter((s) => s.verdict === "struck");
    for (const s of supported) {
      const li = el("li", { class: "claim" }, el("p", { class: "sentence", text: s.text }));
      for (const c of s.citations) li.append(evidence(c, li, s.text));
      list.append(li);
    }

    if (a.abstained) {
      $("abstained").textContent =
        "Not answered: no sentence in the records found supports an answer" +
        (a.abstain_reason ? ": " + a.abstain_reason + "." : ".");
    }
    show($("abstained"), a.abstained);

    // Sentences that are not answers: a declined answer's nearest ones, and
    // supported sentences about something else. Each can open its page.
    const notAnswers = (listId, boxId, items, why) => {
      const list = $(listId);
      clear(list);
      for (const s of items || []) {
        const li = el("li", {}, el("span", { class: "text", text: "“" + s.text + "”" }));
        const c = (s.citations || [])[0];
        if (c) {
          li.append(el("span", { class: "meta", text: `${c.doc_id} · ${pagesLabel(c)} — ${c.title}` }));
        }
        li.append(el("span", { class: "reason", text: why(s) }));
        if (c) li.append(openButton(c, li, null));
        list.append(li);
      }
      show($(boxId), (items || []).length > 0);
    };
    notAnswers("closest-list", "closest-box", a.closest, (s) => "Not an answer: " + s.why_not);
    notAnswers("off-list", "off-box", a.off_question, (s) => "Why: " + (s.reason || "about something else"));

    for (const s of struck) {
      const li = el(
        "li",
        {},
        el("span", { class: "text", text: s.text }),
        el("span", { class: "reason", text: "Struck: " + (s.reason || "not supported by its quote") }),
      );
      $("struck-list").append(li);
    }
    const toggle = $("struck-toggle");
    toggle.setAttribute("aria-expanded", "false");
    show($("struck"), false);
    toggle.textContent = `Show what the verifier struck (${struck.length})`;
    show($("struck-none"), struck.length === 0);
    show($("struck-box"), true);

    show($("downloads"), true);
    $("answer-log").textContent = id
      ? `Logged as answer ${id}; a fact-checker can check it again later with: onrecord replay --id ${id}`
      : "";
    $("answer-heading").focus();
  }

  function toggleStruck() {
    const t = $("struck-toggle");
    const open = t.getAttribute("aria-expanded") !== "true";
    t.setAttribute("aria-expanded", String(open));
    show($("struck"), open);
    const n = $("struck-list").children.length;
    t.textContent = `${open ? "Hide" : "Show"} what the verifier struck (${n})`;
  }

  // ---- The page, opened under the claim it proves -----------------------
  let opener = null;

  function closePage(refocus) {
    const panel = $("page-panel");
    show(panel, false);
    if (opener) {
      opener.setAttribute("aria-expanded", "false");
      if (refocus) opener.focus();
    }
    opener = null;
    // Park the view back in the answer panel, so clearing the ledger keeps it.
    $("answer-panel").insertBefore(panel, $("closest-box"));
  }

  async function openPage(c, holder, button) {
    closePage(false);
    const panel = $("page-panel");
    holder.append(panel);
    opener = button;
    button.setAttribute("aria-expanded", "true");
    const params = new URLSearchParams({ doc: c.doc_id, page: String(c.page), from: String(c.start_char) });
    if (!c.end_page || c.end_page === c.page) params.set("to", String(c.end_char));
    const resp = await fetch("/api/page?" + params.toString(), { credentials: "same-origin" });
    show(panel, true);
    const box = $("page-text");
    clear(box);
    if (!resp.ok) {
      $("page-meta").textContent = await errorOf(resp);
      return;
    }
    const p = await resp.json();
    $("page-heading").textContent = `${p.title}, page ${p.page} of ${p.pages}`;
    $("page-meta").textContent = [p.doc_id, p.organisation, p.date].filter(Boolean).join(" · ");
    if (p.ocr) {
      $("page-ocr").textContent = `This page was read by OCR (${p.ocr.reason}); mean word confidence ${Math.round(p.ocr.confidence)}%.`;
    }
    show($("page-ocr"), !!p.ocr);
    let marked = null;
    for (const s of p.segments) {
      if (s.quote) {
        marked = el("mark", { text: s.text });
        box.append(marked);
      } else {
        box.append(document.createTextNode(s.text));
      }
    }
    $("page-heading").focus();
    if (marked) marked.scrollIntoView({ block: "center" });
  }

  // ---- Downloads -------------------------------------------------------------
  async function download(format) {
    if (!state.answer) return;
    const resp = await fetch("/api/export?format=" + encodeURIComponent(format), {
      method: "POST",
      credentials: "same-origin",
      headers: { "Content-Type": "application/json" },
      body: JSON.stringify(state.answer),
    });
    if (!resp.ok) {
      fail($("ask-error"), await errorOf(resp));
      return;
    }
    const blob = await resp.blob();
    const disposition = resp.headers.get("Content-Disposition") || "";
    const m = /filename="([^"]+)"/.exec(disposition);
    const a = el("a", { href: URL.createObjectURL(blob), download: m ? m[1] : `onrecord-answer.${format}` });
    document.body.append(a);
    a.click();
    setTimeout(() => {
      URL.revokeObjectURL(a.href);
      a.remove();
    }, 1000);
  }

  // ---- Replay ----------------------------------------------------------------
  async function replay(ev) {
    ev.preventDefault();
    show($("replay-error"), false);
    show($("replay-result"), false);
    let text = $("replay-text").value;
    const file = $("replay-file").files[0];
    if (file) text = await file.text();
    if (!text.trim()) {
      fail($("replay-error"), "Choose an answer file or paste an answer first.");
      return;
    }
    $("replay").disabled = true;
    try {
      const resp = await fetch("/api/replay", {
        method: "POST",
        credentials: "same-origin",
        headers: { "Content-Type": "application/json" },
        body: JSON.stringify({ text }),
      });
      if (!resp.ok) {
        fail($("replay-error"), await errorOf(resp));
        return;
      }
      renderReplay(await resp.json());
    } catch (e) {
      fail($("replay-error"), "The connection to onrecord was lost: " + e.message);
    } finally {
      $("replay").disabled = false;
    }
  }

  function renderReplay(r) {
    const body = $("replay-table").tBodies[0];
    clear(body);
    const labels = { holds: "holds", fails: "fails", source_changed: "source changed", source_missing: "source missing" };
    for (const s of r.sentences) {
      const why = [s.reason]
        .concat(s.citations.map((c) => c.note))
        .filter(Boolean)
        .join(" ");
      body.append(
        el(
          "tr",
          {},
          el("td", { text: s.text }),
          el("td", { class: s.verdict === "holds" ? "verdict-held" : "verdict-failed", text: labels[s.verdict] || s.verdict }),
          el("td", { text: why || "Every quote reads as the page does and supports the sentence." }),
        ),
      );
    }
    const c = r.counts;
    $("replay-summary").textContent =
      `${c.holds} hold, ${c.fails} fail, ${c.source_changed} with a changed source, ${c.source_missing} with a missing source.`;
    show($("replay-result"), true);
  }

  document.addEventListener("DOMContentLoaded", () => {
    $("ask-form").addEventListener("submit", ask);
    $("replay-form").addEventListener("submit", replay);
    $("struck-toggle").addEventListener("click", toggleStruck);
    $("page-close").addEventListener("click", () => closePage(true));
    for (const b of document.querySelectorAll("#downloads button")) {
      b.addEventListener("click", () => download(b.dataset.format));
    }
    loadInfo().catch((e) => {
      $("index-summary").textContent = "The index could not be read: " + e.message;
    });
  });
})();
