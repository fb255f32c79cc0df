// Remanence: the little JavaScript of our own. No inline scripts (the CSP forbids them).
// Every htmx request carries the session's CSRF token from the page's meta tag.
document.addEventListener("htmx:configRequest", function (evt) {
  var meta = document.querySelector('meta[name="csrf-token"]');
  if (meta) { evt.detail.headers["X-CSRF-Token"] = meta.content; }
});
