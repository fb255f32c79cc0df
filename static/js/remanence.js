// Remanence: the little JavaScript of our own. No inline scripts (the CSP forbids them).
// Every htmx request carries the session's CSRF token from the page's meta tag.
document.addEventListener("htmx:configRequest", function (evt) {
  var meta = document.querySelector('meta[name="csrf-token"]');
  if (meta) { evt.detail.headers["X-CSRF-Token"] = meta.content; }
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
