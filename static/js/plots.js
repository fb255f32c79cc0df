// Draw every plotly figure on the page from its JSON block (no inline scripts: CSP).
(function () {
  function draw(root) {
    (root || document).querySelectorAll("[data-figure]").forEach(function (el) {
      if (el.dataset.drawn) { return; }
      var src = document.getElementById(el.dataset.figure);
      if (!src || !window.Plotly) { return; }
      var fig = JSON.parse(src.textContent);
      window.Plotly.newPlot(el, fig.data, fig.layout, { responsive: true, displaylogo: false });
      el.dataset.drawn = "1";
    });
  }
  document.addEventListener("DOMContentLoaded", function () { draw(document); });
  document.addEventListener("htmx:afterSwap", function (evt) { draw(evt.target); });
})();
