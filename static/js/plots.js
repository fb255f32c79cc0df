// Draw every plotly figure on the page from its JSON block (no inline scripts: CSP).
// Explorer plots show the structure of the hovered compound and open it on click.
(function () {
  var tip = null;
  function structureTip() {
    if (!tip) {
      tip = document.createElement("img");
      tip.className = "structure-tip";
      tip.alt = "";
      tip.hidden = true;
      document.body.appendChild(tip);
    }
    return tip;
  }
  function wire(el) {
    if (!el.dataset.hoverStructures) { return; }
    el.on("plotly_hover", function (ev) {
      var pt = ev.points && ev.points[0];
      if (!pt || !pt.customdata) { return; }
      var img = structureTip();
      img.src = "/api/v1/compounds/" + encodeURIComponent(pt.customdata[0]) + "/structure.svg?thumbnail=true";
      img.alt = "structure of " + pt.customdata[0];
      img.style.left = (ev.event.pageX + 16) + "px";
      img.style.top = (ev.event.pageY + 16) + "px";
      img.hidden = false;
    });
    el.on("plotly_unhover", function () { structureTip().hidden = true; });
    el.on("plotly_click", function (ev) {
      var pt = ev.points && ev.points[0];
      if (pt && pt.customdata) { window.location.href = "/compounds/" + encodeURIComponent(pt.customdata[0]); }
    });
  }
  function draw(root) {
    (root || document).querySelectorAll("[data-figure]").forEach(function (el) {
      if (el.dataset.drawn) { return; }
      var src = document.getElementById(el.dataset.figure);
      if (!src || !window.Plotly) { return; }
      var fig = JSON.parse(src.textContent);
      window.Plotly.newPlot(el, fig.data, fig.layout, { responsive: true, displaylogo: false }).then(function () { wire(el); });
      el.dataset.drawn = "1";
    });
  }
  document.addEventListener("DOMContentLoaded", function () { draw(document); });
  document.addEventListener("htmx:afterSwap", function (evt) { draw(evt.target); });
})();
