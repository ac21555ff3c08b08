// A button marked data-print opens the browser's print dialogue (no inline script: the CSP).
document.addEventListener("click", (event) => {
  const button = event.target.closest("[data-print]");
  if (button) {
    event.preventDefault();
    window.print();
  }
});
