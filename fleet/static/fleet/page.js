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
  window.addEventListener("beforeprint", () => cautions.forEach((box) => { box.open = true; }));
})();
