// Entries kept on this tablet until the server has them (docs/offline.md).
//
// A form opts in with data-* attributes on the <form> element:
//   data-outbox="Trial"          what one entry is called ("Trial 2 kept on this tablet")
//   data-outbox-test="42"        the test it belongs to
//   data-outbox-version="7"      the test version the page was rendered from
//   data-outbox-preview="#sel"   (optional) a live preview that needs the server
// Saving such a form keeps the entry in IndexedDB first (with its idempotency key and the
// test version it was typed against), clears the form for the next entry, then sends the
// kept entries in order, one at a time; a network failure leaves them kept and retries with
// back-off. The server answers a stale version with 409: the entry stays kept, with both
// versions shown, until the technician sends it again as new or discards it.
// The sign-out form (data-outbox-signout, data-outbox-user) asks before unsent entries go.
(function () {
  "use strict";

  var DB_NAME = "seepline-outbox";
  var STORE = "entries";
  var PAGES_CACHE = "seepline-pages";
  var MAX_DELAY_MS = 60000;
  var KEY_FIELD = "idempotency_key";
  var BASED_ON_FIELD = "based_on_version";

  var flushing = null;
  var again = false;
  var retryTimer = null;
  var failures = 0;
  var status = "";

  // ---------- IndexedDB ----------

  var dbPromise = null;

  function db() {
    if (!dbPromise) {
      dbPromise = new Promise(function (resolve, reject) {
        var request = indexedDB.open(DB_NAME, 1);
        request.onupgradeneeded = function () {
          request.result.createObjectStore(STORE, { keyPath: "id", autoIncrement: true });
        };
        request.onsuccess = function () { resolve(request.result); };
        request.onerror = function () { reject(request.error); };
      });
    }
    return dbPromise;
  }

  function run(mode, work) {
    return db().then(function (database) {
      return new Promise(function (resolve, reject) {
        var tx = database.transaction(STORE, mode);
        var result = work(tx.objectStore(STORE));
        tx.oncomplete = function () { resolve(result && "result" in result ? result.result : result); };
        tx.onerror = function () { reject(tx.error); };
        tx.onabort = function () { reject(tx.error); };
      });
    });
  }

  function user() {
    var form = document.querySelector("form[data-outbox-signout]");
    return form ? form.dataset.outboxUser : null;
  }

  function kept() {
    var me = user();
    return run("readonly", function (store) { return store.getAll(); }).then(function (all) {
      return (all || []).filter(function (e) { return e.user === me; })
        .sort(function (a, b) { return a.id - b.id; });
    });
  }

  function put(entry) { return run("readwrite", function (store) { return store.put(entry); }); }
  function drop(id) { return run("readwrite", function (store) { return store.delete(id); }); }

  // ---------- the page ----------

  function newKey() {
    if (crypto.randomUUID) return crypto.randomUUID();
    var bytes = crypto.getRandomValues(new Uint8Array(16));
    return Array.from(bytes, function (b) { return b.toString(16).padStart(2, "0"); }).join("");
  }

  function csrfToken() {
    var field = document.querySelector("form[data-outbox-signout] input[name=csrf_token]");
    return field ? field.value : "";
  }

  // The newest test version this page has seen: versions only grow, so the largest one on
  // the forms (and the hidden version fields refreshed after each save) is the latest.
  function knownVersion(test) {
    var best = 0;
    document.querySelectorAll('form[data-outbox-test="' + test + '"]').forEach(function (f) {
      best = Math.max(best, Number(f.dataset.outboxVersion) || 0);
    });
    document.querySelectorAll('input[type=hidden][name=version][id^="tv-"]').forEach(function (f) {
      best = Math.max(best, Number(f.value) || 0);
    });
    return best;
  }

  function noteVersion(test, version) {
    document.querySelectorAll('form[data-outbox-test="' + test + '"]').forEach(function (f) {
      if ((Number(f.dataset.outboxVersion) || 0) < version) f.dataset.outboxVersion = String(version);
    });
  }

  function labelOf(control) {
    var label = control.id && document.querySelector('label[for="' + control.id + '"]');
    return label ? label.textContent.trim() : control.name;
  }

  function typedControls(form) {
    return Array.from(form.elements).filter(function (c) {
      return c.name && c.type !== "hidden" && c.type !== "submit" && c.type !== "button" && !c.disabled;
    });
  }

  function hasTyping(form) {
    return typedControls(form).some(function (c) {
      return c.tagName !== "SELECT" && c.type !== "checkbox" && c.type !== "radio" && c.value.trim() !== "";
    });
  }

  function keep(form) {
    // A second tap on Save just after the first finds the form already cleared: not an entry.
    if (!hasTyping(form) && Date.now() - (Number(form.dataset.outboxKeptAt) || 0) < 3000) {
      return Promise.resolve();
    }
    form.dataset.outboxKeptAt = String(Date.now());
    var test = form.dataset.outboxTest;
    var fields = [];
    new FormData(form).forEach(function (value, name) {
      if (typeof value === "string" && name !== "csrf_token" && name !== KEY_FIELD && name !== BASED_ON_FIELD) {
        fields.push([name, value]);
      }
    });
    var keyField = form.querySelector('input[name="' + KEY_FIELD + '"]');
    var shown = [];
    typedControls(form).forEach(function (c) {
      var value = c.tagName === "SELECT" ? (c.selectedOptions[0] || {}).textContent : c.value;
      if (c.tagName !== "SELECT" && (value || "").trim() === "") return;
      if ((c.type === "checkbox" || c.type === "radio") && !c.checked) return;
      shown.push([labelOf(c), (value || "").trim()]);
    });
    var entry = {
      user: user(),
      test: test,
      label: form.dataset.outbox || "Entry",
      url: form.getAttribute("action"),
      form: form.id,
      target: form.getAttribute("hx-target") || "#" + form.id,
      fields: fields,
      shown: shown,
      key: (keyField && keyField.value) || newKey(),
      basedOn: knownVersion(test),
      state: "kept",
      keptAt: new Date().toISOString(),
      interactive: true,
    };
    typedControls(form).forEach(function (c) {
      if (c.tagName === "SELECT" || c.type === "checkbox" || c.type === "radio") return;
      c.value = "";
    });
    if (keyField) keyField.value = newKey();
    return put(entry).then(render).then(flush);
  }

  // ---------- sending ----------

  function body(entry) {
    var params = new URLSearchParams();
    entry.fields.forEach(function (pair) { params.append(pair[0], pair[1]); });
    params.set(KEY_FIELD, entry.key);
    params.set(BASED_ON_FIELD, String(entry.basedOn));
    params.set("csrf_token", csrfToken());
    return params;
  }

  function parse(html) {
    return new DOMParser().parseFromString(html, "text/html");
  }

  function versionIn(doc, test) {
    var best = 0;
    doc.querySelectorAll('form[data-outbox-test="' + test + '"], [data-current-version]').forEach(function (el) {
      best = Math.max(best, Number(el.dataset.outboxVersion || el.dataset.currentVersion) || 0);
    });
    return best;
  }

  function messageIn(doc) {
    var alert = doc.querySelector("[role=alert]");
    var parts = [];
    if (alert) return alert.outerHTML;
    doc.querySelectorAll(".field-error").forEach(function (slot) {
      var text = slot.textContent.trim();
      var field = slot.id.replace(/^err-/, "f-");
      var label = doc.querySelector('label[for="' + field + '"]');
      if (text) parts.push((label ? label.textContent.trim() + ": " : "") + text);
    });
    var p = document.createElement("p");
    p.textContent = parts.length ? parts.join(" · ") : "The server did not accept this entry.";
    return p.outerHTML;
  }

  // Swap a section the server answered into the page, keeping whatever is being typed into
  // that section's form now (it is the next entry, not the one that was sent).
  function swapIn(entry, html) {
    var target = document.querySelector(entry.target);
    if (!target || !window.htmx) return;
    var form = entry.form && document.getElementById(entry.form);
    var typing = form ? typedControls(form).filter(function (c) { return c.value !== ""; })
      .map(function (c) { return [c.name, c.value]; }) : [];
    htmx.swap({ text: html, target: target, swap: "outerHTML" });
    var fresh = entry.form && document.getElementById(entry.form);
    if (!fresh) return;
    typing.forEach(function (pair) {
      var control = fresh.elements.namedItem(pair[0]);
      if (control && control.value === "") control.value = pair[1];
    });
  }

  function scheduleRetry() {
    clearTimeout(retryTimer);
    failures += 1;
    var delay = Math.min(MAX_DELAY_MS, 1000 * Math.pow(2, failures - 1)) * (0.75 + Math.random() * 0.5);
    retryTimer = setTimeout(flush, delay);
    return Math.round(delay / 1000);
  }

  async function send(entry, remaining) {
    var response;
    try {
      response = await fetch(entry.url, {
        method: "POST",
        body: body(entry),
        credentials: "same-origin",
        redirect: "manual",
        headers: {
          "HX-Request": "true",
          "HX-Target": entry.target.replace(/^#/, ""),
          "X-CSRF-Token": csrfToken(),
        },
      });
    } catch (error) {
      status = navigator.onLine ? "retry" : "offline";
      return false;
    }
    if (response.type === "opaqueredirect" || response.status === 401) {
      status = "signin";
      return false;
    }
    if (response.status >= 500 || response.status === 429 || response.status === 408) {
      status = "retry";
      return false;
    }
    var html = await response.text();
    var doc = parse(html);
    var version = versionIn(doc, entry.test);
    if (response.ok) {
      await drop(entry.id);
      if (version > entry.basedOn) {
        // Our own entry moved the version on: the later entries were typed after it.
        for (var i = 0; i < remaining.length; i++) {
          if (remaining[i].test === entry.test && remaining[i].basedOn === entry.basedOn) {
            remaining[i].basedOn = version;
            await put(remaining[i]);
          }
        }
        noteVersion(entry.test, version);
      }
      swapIn(entry, html);
      return true;
    }
    var form = entry.form && document.getElementById(entry.form);
    if (response.status === 422 && entry.interactive && form && !hasTyping(form)) {
      // Just tapped, refused: back into the form with the messages beside the fields.
      await drop(entry.id);
      swapIn(entry, html);
      return true;
    }
    entry.state = response.status === 409 && version ? "conflict" : "refused";
    entry.message = messageIn(doc);
    entry.currentVersion = version || null;
    entry.interactive = false;
    await put(entry);
    if (version) noteVersion(entry.test, version);
    return true;
  }

  function flush() {
    if (flushing) {
      again = true;
      return flushing;
    }
    clearTimeout(retryTimer);
    flushing = (async function () {
      do {
        again = false;
        var entries = (await kept()).filter(function (e) { return e.state === "kept"; });
        if (entries.length && !navigator.onLine) {
          status = "offline";
          break;
        }
        status = entries.length ? "sending" : "";
        await render();
        for (var i = 0; i < entries.length; i++) {
          var went = await send(entries[i], entries.slice(i + 1));
          if (!went) break;
          failures = 0;
          status = i + 1 < entries.length ? "sending" : "";
          await render();
        }
        if (status === "retry") status = "retry:" + scheduleRetry();
      } while (again);
    })().catch(function () {
      status = "retry:" + scheduleRetry();
    }).finally(function () {
      flushing = null;
      return render();
    });
    return flushing;
  }

  // ---------- what the technician sees ----------

  function el(tag, attrs, text) {
    var node = document.createElement(tag);
    Object.keys(attrs || {}).forEach(function (name) { node.setAttribute(name, attrs[name]); });
    if (text) node.textContent = text;
    return node;
  }

  function statusText(count) {
    if (status === "offline") return count ? "No connection: they will be sent when it returns." : "No connection. Entries you save are kept on this tablet until it returns.";
    if (status === "sending") return "Sending…";
    if (status === "signin") return "Sign in again (in another tab) to send them; they stay kept here.";
    if (status.indexOf("retry:") === 0) return "The server did not answer; trying again in " + status.slice(6) + " s.";
    return "";
  }

  function bar() {
    var existing = document.getElementById("outbox-bar");
    if (existing) return existing;
    var main = document.getElementById("main");
    if (!main) return null;
    var node = el("div", { id: "outbox-bar", class: "outbox-bar", role: "status", "aria-live": "polite" });
    main.insertBefore(node, main.firstChild);
    return node;
  }

  function entryView(entry, index) {
    var item = el("li", { class: "outbox-entry outbox-entry--" + entry.state, "data-outbox-entry": entry.key });
    var head = el("p", { class: "outbox-entry__head" });
    var states = { kept: "not yet sent", conflict: "not saved: the test changed", refused: "not saved: refused" };
    head.appendChild(el("strong", {}, "Kept " + entry.label.toLowerCase() + " " + (index + 1)));
    head.appendChild(document.createTextNode(" · on this tablet, " + states[entry.state]));
    item.appendChild(head);
    var figures = el("dl", { class: "outbox-entry__figures" });
    entry.shown.forEach(function (pair) {
      var row = el("div");
      row.appendChild(el("dt", {}, pair[0]));
      row.appendChild(el("dd", {}, pair[1]));
      figures.appendChild(row);
    });
    if (entry.state !== "conflict") item.appendChild(figures); // the conflict table has them
    if (entry.message) {
      var message = el("div", { class: "outbox-entry__message" });
      message.innerHTML = entry.message; // the server's own escaped HTML, kept as it came
      item.appendChild(message);
    }
    if (entry.state !== "kept") {
      var actions = el("div", { class: "outbox-entry__actions" });
      if (entry.state === "conflict") {
        actions.appendChild(el("button", { type: "button", class: "button", "data-outbox-resend": entry.id }, "Send again as a new entry"));
      } else if (entry.form && document.getElementById(entry.form)) {
        actions.appendChild(el("button", { type: "button", class: "button", "data-outbox-restore": entry.id }, "Put back in the form"));
      }
      actions.appendChild(el("button", { type: "button", class: "button button--quiet", "data-outbox-discard": entry.id }, "Discard…"));
      item.appendChild(actions);
    }
    return item;
  }

  async function render() {
    if (!user()) return;
    var entries = await kept();
    var node = bar();
    if (node) {
      var waiting = entries.filter(function (e) { return e.state === "kept"; }).length;
      var blocked = entries.length - waiting;
      var keeps = entries.length || document.querySelector("form[data-outbox]");
      var line = keeps ? statusText(entries.length) : "";
      node.textContent = "";
      node.hidden = !entries.length && !line;
      node.className = "outbox-bar" + (status === "offline" ? " outbox-bar--offline" : "");
      if (entries.length) {
        node.appendChild(el("strong", { "data-testid": "outbox-count" }, "Kept on this tablet, not yet sent (" + entries.length + ")"));
      }
      if (blocked) node.appendChild(el("span", {}, blocked + " need" + (blocked === 1 ? "s" : "") + " your decision (below)."));
      if (line) node.appendChild(el("span", {}, line));
    }
    document.querySelectorAll("form[data-outbox]").forEach(function (form) {
      var listId = "outbox-for-" + form.id;
      var list = document.getElementById(listId);
      var mine = entries.filter(function (e) { return e.form === form.id && e.test === form.dataset.outboxTest; });
      if (!mine.length) {
        if (list) list.remove();
        return;
      }
      if (!list) {
        list = el("ol", { id: listId, class: "outbox-list", "aria-label": "Kept on this tablet, not yet sent" });
        form.insertAdjacentElement("afterend", list);
      }
      list.textContent = "";
      mine.forEach(function (entry, i) { list.appendChild(entryView(entry, i)); });
    });
    previewNotes();
  }

  function previewNotes() {
    document.querySelectorAll("form[data-outbox-preview]").forEach(function (form) {
      var preview = document.querySelector(form.dataset.outboxPreview);
      if (!preview) return;
      var note = preview.querySelector(".outbox-preview-note");
      if (navigator.onLine) {
        if (note) note.remove();
        preview.classList.remove("outbox-preview--waiting");
        return;
      }
      preview.classList.add("outbox-preview--waiting");
      if (!note) {
        preview.insertBefore(el("p", { class: "outbox-preview-note", role: "status" },
          "No connection: the live result will update when the connection returns. What you type stays in the form; Save keeps it on this tablet."), preview.firstChild);
      }
    });
  }

  function refreshPreviews() {
    document.querySelectorAll("form[data-outbox-preview]").forEach(function (form) {
      var first = typedControls(form).find(function (c) { return c.tagName === "INPUT" && c.value !== ""; });
      if (first) first.dispatchEvent(new Event("input", { bubbles: true }));
    });
  }

  async function byId(id) {
    return (await kept()).find(function (e) { return String(e.id) === String(id); });
  }

  document.addEventListener("click", async function (event) {
    var button = event.target.closest("[data-outbox-resend], [data-outbox-restore], [data-outbox-discard]");
    if (!button) return;
    var entry = await byId(button.dataset.outboxResend || button.dataset.outboxRestore || button.dataset.outboxDiscard);
    if (!entry) return render();
    if (button.dataset.outboxDiscard) {
      if (window.confirm("Discard this " + entry.label.toLowerCase() + "? What was typed for it will be lost; this cannot be undone.")) {
        await drop(entry.id);
      }
      return render();
    }
    if (button.dataset.outboxResend) {
      entry.key = newKey();
      entry.basedOn = Math.max(entry.currentVersion || 0, knownVersion(entry.test));
      entry.state = "kept";
      entry.message = null;
      await put(entry);
      return flush();
    }
    var form = document.getElementById(entry.form);
    if (!form) return;
    if (hasTyping(form) && !window.confirm("Replace what is typed in the form now with this kept entry?")) return;
    typedControls(form).forEach(function (c) { if (c.tagName !== "SELECT") c.value = ""; });
    entry.fields.forEach(function (pair) {
      var control = form.elements.namedItem(pair[0]);
      if (control && control.type !== "hidden") control.value = pair[1];
    });
    var keyField = form.querySelector('input[name="' + KEY_FIELD + '"]');
    if (keyField) keyField.value = entry.key;
    await drop(entry.id);
    await render();
    refreshPreviews();
  });

  // Saving an opted-in form keeps it first (capture phase: before htmx sees the submit).
  document.addEventListener("submit", function (event) {
    var form = event.target;
    if (form.matches("form[data-outbox]")) {
      event.preventDefault();
      event.stopPropagation();
      keep(form);
      return;
    }
    if (form.matches("form[data-outbox-signout]")) {
      event.preventDefault();
      event.stopPropagation();
      signOut(form);
    }
  }, true);

  // An opted-in form is never sent by htmx itself, and nothing waits on a preview offline.
  document.addEventListener("htmx:before:request", function (event) {
    var source = event.target;
    if (!source.matches) return;
    if (source.matches("form[data-outbox]")) {
      event.preventDefault();
    } else if (!navigator.onLine && source.id &&
      document.querySelector('form[data-outbox-preview="#' + source.id + '"]')) {
      event.preventDefault();
    }
  });

  document.addEventListener("htmx:after:swap", function () { render(); });

  async function signOut(form) {
    var entries = await kept();
    if (entries.length) {
      var n = entries.length;
      var ok = window.confirm(n + (n === 1 ? " entry is" : " entries are") + " kept on this tablet and not yet sent. " +
        "Signing out now discards " + (n === 1 ? "it" : "them") + " for good. Sign out and discard " + (n === 1 ? "it" : "them") + "?");
      if (!ok) return;
      for (var i = 0; i < entries.length; i++) await drop(entries[i].id);
    }
    if (window.caches) await caches.delete(PAGES_CACHE);
    HTMLFormElement.prototype.submit.call(form);
  }

  window.addEventListener("online", function () {
    failures = 0;
    status = "";
    refreshPreviews();
    flush();
  });
  window.addEventListener("offline", function () {
    status = "offline";
    render();
  });

  function keepShell() {
    if (!("serviceWorker" in navigator)) return;
    navigator.serviceWorker.register("/sw.js", { scope: "/" }).then(function () {
      return navigator.serviceWorker.ready;
    }).then(function (registration) {
      var urls = [location.pathname];
      document.querySelectorAll("script[src], link[rel=stylesheet][href], link[rel=icon][href]").forEach(function (node) {
        urls.push(node.getAttribute("src") || node.getAttribute("href"));
      });
      if (registration.active && navigator.onLine) registration.active.postMessage({ keep: urls });
    }).catch(function () { /* no service worker: the page still works online */ });
  }

  function start() {
    if (!user()) return;
    if (!navigator.onLine) status = "offline";
    keepShell();
    render().then(flush);
  }

  if (document.readyState === "loading") document.addEventListener("DOMContentLoaded", start);
  else start();
})();
