// Buttons marked data-print print the page (a static file: the Content-Security-Policy forbids inline handlers).
document.addEventListener("click", (event) => {
  if (event.target.closest("[data-print]")) window.print();
});
