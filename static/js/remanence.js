// Remanence: the little JavaScript of our own. No inline scripts (the CSP forbids them).
// Every htmx request carries the session's CSRF token from the page's meta tag.
document.addEventListener("htmx:configRequest", function (evt) {
  var meta = document.querySelector('meta[name="csrf-token"]');
  if (meta) { evt.detail.headers["X-CSRF-Token"] = meta.content; }
});

// A view form (form[data-view-form], the registry's filters) holds the whole state of its view, sort
// and page included (hidden fields). A link with data-view-change (a sort header, a pager link) writes
// its change into the form and sends the form, so its request carries every filter as typed now, and
// the form's next request (a filter typed a moment later) keeps the sort. The form's hx-sync queues
// requests: the newest is sent, with the form's state at that moment, once the one under way is answered.
// Editing a filter goes back to the first page (no page number, no keyset position). Empty fields
// are left out of the request, so the
// address pushed to the history is the same short link the server writes. Without JavaScript the
// links' own addresses serve.
document.addEventListener("click", function (evt) {
  var link = evt.target.closest && evt.target.closest("a[data-view-change]");
  if (!link || evt.button !== 0 || evt.ctrlKey || evt.metaKey || evt.shiftKey || evt.altKey) { return; }
  var form = document.getElementById(link.dataset.viewForm);
  if (!form) { return; }
  evt.preventDefault();
  var change = JSON.parse(link.dataset.viewChange);
  Object.keys(change).forEach(function (name) {
    if (form.elements[name]) { form.elements[name].value = change[name]; }
  });
  if (form.requestSubmit) { form.requestSubmit(); } else { htmx.trigger(form, "submit"); }
});
["input", "change"].forEach(function (type) {
  document.addEventListener(type, function (evt) {
    var form = evt.target.form;
    if (!form || !form.hasAttribute("data-view-form") || evt.target.type === "hidden") { return; }
    ["page", "after", "before"].forEach(function (name) {  // a new filter: its first page
      if (form.elements[name]) { form.elements[name].value = ""; }
    });
  }, true);  // capture: before htmx sends the form on "change"
});
// Typing in a search box sends the form after a pause ("typed"); any request of the form cancels a pause
// still running, since it already carries what was typed (no second, stale-looking request after it).
var typingPause = new WeakMap();
document.addEventListener("input", function (evt) {
  var box = evt.target, form = box.form;
  if (!form || !form.hasAttribute("data-view-form") || box.type !== "search") { return; }
  clearTimeout(typingPause.get(form));
  typingPause.set(form, setTimeout(function () { htmx.trigger(form, "typed"); }, 500));
});
document.addEventListener("htmx:configRequest", function (evt) {
  var elt = evt.detail.elt;
  if (!elt.hasAttribute || !elt.hasAttribute("data-view-form")) { return; }
  clearTimeout(typingPause.get(elt));
  var params = evt.detail.parameters;
  Object.keys(params).forEach(function (name) {
    if (params[name] === "") { delete params[name]; }
  });
});

// Upload forms: a progress bar while the file travels, and a drop zone around the file input.
document.addEventListener("htmx:xhr:progress", function (evt) {
  var form = evt.target.closest ? evt.target.closest("form[data-progress]") : null;
  if (!form || !evt.detail.lengthComputable) { return; }
  var bar = document.getElementById(form.dataset.progress);
  if (bar) { bar.hidden = false; bar.value = Math.round((evt.detail.loaded / evt.detail.total) * 100); }
});
document.addEventListener("dragover", function (evt) {
  var zone = evt.target.closest && evt.target.closest(".dropzone");
  if (zone) { evt.preventDefault(); zone.classList.add("over"); }
});
document.addEventListener("dragleave", function (evt) {
  var zone = evt.target.closest && evt.target.closest(".dropzone");
  if (zone) { zone.classList.remove("over"); }
});
document.addEventListener("drop", function (evt) {
  var zone = evt.target.closest && evt.target.closest(".dropzone");
  if (!zone) { return; }
  evt.preventDefault();
  zone.classList.remove("over");
  var input = zone.querySelector('input[type="file"]');
  if (input && evt.dataTransfer && evt.dataTransfer.files.length) { input.files = evt.dataTransfer.files; }
});

// A button with data-copy="<selector>" copies that field's value and says so on the button.
document.addEventListener("click", function (evt) {
  var button = evt.target.closest && evt.target.closest("button[data-copy]");
  if (!button) return;
  var field = document.querySelector(button.getAttribute("data-copy"));
  if (!field) return;
  var done = function () {
    var before = button.textContent;
    button.textContent = "Copied";
    setTimeout(function () { button.textContent = before; }, 1500);
  };
  if (navigator.clipboard && window.isSecureContext) {
    navigator.clipboard.writeText(field.value).then(done, function () { field.select(); });
  } else {
    field.select();
    document.execCommand("copy");
    done();
  }
});

// Keyboard and screen readers (issue 24).
(function () {
  var FOCUSABLE = "a[href], button, input, select, textarea, summary, [tabindex]";

  // A card whose content is wider than the screen scrolls sideways inside itself; with nothing focusable
  // in it a keyboard could not scroll it, so it becomes a named, focusable region while (and only while)
  // it overflows.
  function reachable(root) {
    (root || document).querySelectorAll(".card, .scroll").forEach(function (el) {
      var overflows = el.scrollWidth > el.clientWidth + 1;
      if (overflows && !el.hasAttribute("tabindex") && !el.querySelector(FOCUSABLE)) {
        var heading = el.querySelector("h1, h2, h3, caption");
        el.setAttribute("tabindex", "0");
        el.dataset.madeReachable = "1";
        if (!el.getAttribute("role")) { el.setAttribute("role", "region"); }
        if (!el.getAttribute("aria-label")) {
          el.setAttribute("aria-label", heading ? heading.textContent.trim() : "scrolling content");
        }
      } else if (!overflows && el.dataset.madeReachable) {
        el.removeAttribute("tabindex");
        delete el.dataset.madeReachable;
      }
    });
  }
  var resizeTimer = null;
  window.addEventListener("resize", function () {
    clearTimeout(resizeTimer);
    resizeTimer = setTimeout(function () { reachable(document); }, 150);
  });
  document.addEventListener("DOMContentLoaded", function () { reachable(document); });

  // A region that polls itself (hx-trigger "every ...") is not redrawn while focus is inside it:
  // the request is skipped until the user leaves, so a keyboard user is never thrown to the page top.
  document.addEventListener("htmx:beforeRequest", function (evt) {
    var el = evt.detail.elt;
    var trigger = (el.getAttribute && el.getAttribute("hx-trigger")) || "";
    if (trigger.indexOf("every ") === -1) { return; }
    var target = evt.detail.target || el;
    if (target.contains(document.activeElement) && document.activeElement !== document.body) {
      evt.preventDefault();
    }
  });

  // After a swap, focus goes where the user's attention should: htmx itself puts it back on an element
  // with the same id (sort headers and pager links have stable ids); when it was lost instead, it moves
  // to the error in the new content, else to the swapped region (made focusable for the purpose).
  // Both happen in htmx:afterSwap, in the same task as the swap itself, so no script or assistive
  // technology ever sees the new content with focus on the body. (htmx:afterSettle comes a settle
  // delay later, a timer that a busy machine stretches: placing focus there left a window in which
  // the new table was shown and focus was nowhere.)
  // While a region is being redrawn it carries aria-busy="true": from a request for it until the newest
  // such request has ended (answered, aborted by a newer one, or failed) and its content has settled.
  // The request's own loadend event ends it, which comes after htmx has handled the answer.
  var latest = new WeakMap();
  function settleBusy(target) {
    var xhr = latest.get(target);
    var inFlight = !!xhr && xhr.readyState > 0 && xhr.readyState < 4;
    if (inFlight || target.classList.contains("htmx-settling")) { target.setAttribute("aria-busy", "true"); }
    else { target.removeAttribute("aria-busy"); }
  }
  var lost = false;
  document.addEventListener("htmx:beforeRequest", function (evt) {
    var target = evt.detail.target, xhr = evt.detail.xhr;
    if (evt.defaultPrevented || !target || !target.setAttribute || !xhr) { return; }
    latest.set(target, xhr);
    target.setAttribute("aria-busy", "true");
    xhr.addEventListener("loadend", function () { settleBusy(target); });
  });
  document.addEventListener("htmx:beforeSwap", function (evt) {
    var active = document.activeElement;
    lost = !!(active && active !== document.body && evt.detail.target.contains(active));
  });
  document.addEventListener("htmx:afterSwap", function (evt) {
    var target = evt.detail.target;
    var active = document.activeElement;
    if (!lost || (active && active !== document.body && document.contains(active))) { lost = false; return; }
    lost = false;
    var error = target.querySelector('[role="alert"], .error');
    var goal = error || target;
    if (!goal.matches(FOCUSABLE)) { goal.setAttribute("tabindex", "-1"); }
    goal.focus({ preventScroll: false });
  });
  document.addEventListener("htmx:afterSettle", function (evt) {
    var target = evt.detail.target;
    reachable(target.parentNode || document);
    settleBusy(target);
  });

  // An error about one box of a form (an element with data-field, as the registry's view error) marks
  // that box invalid and points it at the message; the marks go when the error does.
  function markInvalid() {
    document.querySelectorAll("[aria-invalid][data-marked-invalid]").forEach(function (field) {
      field.removeAttribute("aria-invalid");
      field.removeAttribute("aria-describedby");
      delete field.dataset.markedInvalid;
    });
    document.querySelectorAll("[role=alert][data-field][id]").forEach(function (error) {
      document.querySelectorAll("form [name='" + error.dataset.field + "']").forEach(function (field) {
        if (field.type === "hidden") { return; }
        field.setAttribute("aria-invalid", "true");
        field.setAttribute("aria-describedby", error.id);
        field.dataset.markedInvalid = "1";
      });
    });
  }
  document.addEventListener("DOMContentLoaded", markInvalid);
  document.addEventListener("htmx:afterSwap", markInvalid);
})();

// Phones: the main navigation folds behind a "Menu" button (CSS shows the button below 600 px only).
document.addEventListener("DOMContentLoaded", function () {
  var bar = document.querySelector(".topbar");
  var toggle = bar && bar.querySelector(".navtoggle");
  if (!toggle) { return; }
  bar.classList.add("collapsible");
  toggle.hidden = false;
  toggle.addEventListener("click", function () {
    var open = bar.classList.toggle("open");
    toggle.setAttribute("aria-expanded", open ? "true" : "false");
  });
});
