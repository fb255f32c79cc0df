// Starts Swagger UI on /docs. It lives in this file, not in the page, because the content
// security policy allows scripts from our own origin only (no inline script, no CDN).
window.addEventListener("DOMContentLoaded", function () {
  var root = document.getElementById("swagger-ui");
  window.ui = SwaggerUIBundle({
    url: root.dataset.openapiUrl,
    dom_id: "#swagger-ui",
    deepLinking: true,
    layout: "BaseLayout",
    presets: [SwaggerUIBundle.presets.apis, SwaggerUIBundle.SwaggerUIStandalonePreset],
    // The validator badge would fetch an image from a public server: off, the page stays offline.
    validatorUrl: null,
  });
});
