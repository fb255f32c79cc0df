// Draw every plotly figure on the page from its JSON block (no inline scripts: CSP).
// Explorer plots show the structure of the hovered compound and open it on click.
(function () {
  // The one plotly configuration every figure uses. Nothing on a plot may talk to a host other than
  // ours: plotly.js 4 shows a "Share chart..." button by default (showSendToCloud) that posts the whole
  // figure, data included, to the vendor's hosted service, and its logo links there. Both are off, and
  // the cloud buttons are removed by name as well, in case a later plotly.js brings them back under a
  // new default. The content security policy (server/app.py: connect-src, form-action) refuses such
  // requests as a second line. Saving a PNG stays: it is made in the browser.
  var CONFIG = {
    responsive: true,
    displaylogo: false,
    showLink: false,
    showSendToCloud: false,
    showEditInChartStudio: false,
    plotlyServerURL: "",
    modeBarButtonsToRemove: ["sendChartToCloud", "sendDataToCloud", "editInChartStudio"],
    toImageButtonOptions: { format: "png", scale: 2 }
  };
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
      window.Plotly.newPlot(el, fig.data, fig.layout, CONFIG).then(function () { wire(el); });
      el.dataset.drawn = "1";
    });
  }
  document.addEventListener("DOMContentLoaded", function () { draw(document); });
  document.addEventListener("htmx:afterSwap", function (evt) { draw(evt.target); });
})();
