// Behaviour shared by the pages (a static file: the Content-Security-Policy forbids inline handlers).
(function () {
  // A refused form: its summary of what to put right is the first thing in view (and read out).
  const summary = document.getElementById("error-summary");
  if (summary) {
    summary.scrollIntoView({ block: "start" });
    summary.focus({ preventScroll: true });
  }
  // The cautions stay on every page that sends someone to a motor; folded once read, they stay
  // folded for the rest of this session (the heading still shows), and open again to print.
  const FOLDED = "cautions-folded";
  const cautions = document.querySelectorAll("details[data-cautions]");
  let folded = false;
  try { folded = sessionStorage.getItem(FOLDED) === "1"; } catch (error) { /* storage off */ }
  cautions.forEach((box) => {
    if (folded) box.open = false;
    box.addEventListener("toggle", () => {
      try { sessionStorage.setItem(FOLDED, box.open ? "0" : "1"); } catch (error) { /* storage off */ }
    });
  });
  // Charts: each box names the JSON of its figure (data-figure). Plotly's own resize leaves a
  // wrapped legend where the narrower layout put it (over the bars once the window is wide again),
  // so when the width changes each chart is drawn again from its figure as sent: the layout of the
  // new width, as a fresh load gives it. The shown group of a chart with buttons is kept.
  const charts = [...document.querySelectorAll("[data-figure]")];
  if (charts.length && window.Plotly) {
    const figure = (box) => JSON.parse(document.getElementById(box.dataset.figure).textContent);
    const options = { responsive: true, displaylogo: false };
    charts.forEach((box) => { const fig = figure(box); Plotly.newPlot(box, fig.data, fig.layout, options); });
    let drawnWidth = window.innerWidth;
    let pending = null;
    window.addEventListener("resize", () => {
      clearTimeout(pending);
      pending = setTimeout(() => {
        if (window.innerWidth === drawnWidth) return;
        drawnWidth = window.innerWidth;
        charts.forEach((box) => {
          const fig = figure(box);
          if (box.layout && box.layout.updatemenus) fig.layout.updatemenus = box.layout.updatemenus;
          (box.data || []).forEach((trace, k) => { if (fig.data[k]) fig.data[k].visible = trace.visible; });
          Plotly.react(box, fig.data, fig.layout, options);
        });
      }, 250);
    });
  }
  // Printed, every folded box shows what it holds (the cautions, the work orders' visits).
  window.addEventListener("beforeprint", () => {
    document.querySelectorAll("details[data-cautions], details.visit").forEach((box) => { box.open = true; });
  });
})();
