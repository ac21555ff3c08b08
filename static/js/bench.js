// Bench behaviour, loaded as a file (no inline script, so a strict CSP can forbid them).
// 1. Stopwatch: one tap starts timing a trial, the next tap stops it and writes the
//    duration ("754.3 s") into that trial's duration field, which htmx then reduces.
// 2. After htmx swaps field messages in out of band, mark the fields they describe.
// 3. Enter ("next" on a tablet's keypad) in a number field moves on to the next number
//    field of its form, and from the last one to the form's button, instead of submitting.
(function () {
  "use strict";

  function format(seconds) {
    var minutes = Math.floor(seconds / 60);
    var rest = seconds - minutes * 60;
    var hours = Math.floor(minutes / 60);
    minutes = minutes % 60;
    var sec = rest.toFixed(1).padStart(4, "0");
    var mm = hours ? String(minutes).padStart(2, "0") : String(minutes);
    return (hours ? hours + ":" : "") + mm + ":" + sec;
  }

  function tick(watch) {
    if (!watch.isConnected || watch.dataset.running !== "true") {
      clearInterval(Number(watch.dataset.timer));
      return;
    }
    var elapsed = (Date.now() - Number(watch.dataset.startedAt)) / 1000;
    watch.querySelector("[data-stopwatch-time]").textContent = format(elapsed);
  }

  function start(watch, button) {
    watch.dataset.startedAt = String(Date.now());
    watch.dataset.running = "true";
    button.textContent = "Stop timing";
    button.setAttribute("aria-pressed", "true");
    watch.dataset.timer = String(setInterval(function () { tick(watch); }, 100));
    tick(watch);
  }

  function stop(watch, button) {
    var elapsed = (Date.now() - Number(watch.dataset.startedAt)) / 1000;
    clearInterval(Number(watch.dataset.timer));
    watch.dataset.running = "false";
    button.textContent = "Start timing";
    button.setAttribute("aria-pressed", "false");
    watch.querySelector("[data-stopwatch-time]").textContent = format(elapsed);
    var field = document.getElementById(watch.dataset.stopwatchFor);
    if (field) {
      var unit = document.getElementById(field.id + "-unit");
      if (unit) {
        unit.value = "s";
        field.value = elapsed.toFixed(1);
      } else {
        field.value = elapsed.toFixed(1) + " s";
      }
      field.dispatchEvent(new Event("input", { bubbles: true }));
    }
  }

  document.addEventListener("click", function (event) {
    var button = event.target.closest("[data-stopwatch-toggle]");
    if (!button) return;
    var watch = button.closest("[data-stopwatch]");
    if (watch.dataset.running === "true") {
      stop(watch, button);
    } else {
      start(watch, button);
    }
  });

  function markInvalidFields() {
    document.querySelectorAll(".field-error[id]").forEach(function (slot) {
      var field = document.querySelector('[aria-describedby~="' + slot.id + '"]');
      if (!field) return;
      var refused = slot.textContent.trim() !== "" && !slot.classList.contains("field-error--needed");
      if (refused) {
        field.setAttribute("aria-invalid", "true");
      } else {
        field.removeAttribute("aria-invalid");
      }
    });
  }

  document.addEventListener("htmx:after:swap", markInvalidFields);

  // A field inside a closed <details> still has a box in Chromium (its content is only
  // content-visibility: hidden), but it cannot take focus: skip it.
  function visible(element) {
    if (element.disabled || element.closest("details:not([open])")) return false;
    return element.getClientRects().length > 0;
  }

  document.addEventListener("keydown", function (event) {
    var field = event.target;
    if (event.key !== "Enter" || !field.matches || !field.matches("[data-next-field]")) return;
    var form = field.form;
    if (!form) return;
    event.preventDefault();
    var fields = Array.prototype.filter.call(form.querySelectorAll("[data-next-field]"), visible);
    var next = fields[fields.indexOf(field) + 1] || form.querySelector("[type=submit]");
    if (next) next.focus();
  });
})();
