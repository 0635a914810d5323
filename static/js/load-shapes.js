// Upload progress for the metered-year import: htmx reports the request's progress as
// htmx:xhr:progress events on the form; the box named by data-progress-box (a <progress> and a
// line of text) shows it.
// Without script the form posts as usual and the page answers when the server has read the file.
(function () {
  "use strict";

  function parts(form) {
    var box = document.getElementById(form.getAttribute("data-progress-box") || "");
    if (!box) return null;
    return { box: box, bar: box.querySelector("progress"), text: box.querySelector("[aria-live]") };
  }

  function formOf(event) {
    var elt = event.detail && event.detail.elt ? event.detail.elt : event.target;
    return elt && elt.closest ? elt.closest("form[data-progress-box]") : null;
  }

  document.addEventListener("htmx:beforeSend", function (event) {
    var form = formOf(event);
    var p = form && parts(form);
    if (!p) return;
    p.box.hidden = false;
    p.bar.value = 0;
    p.bar.max = 100;
    p.text.textContent = "Sending the file…";
  });

  // Both the upload and the answer's download report progress; the bar only ever moves forward,
  // so once the file is sent it stays full while the server checks the rows.
  document.addEventListener("htmx:xhr:progress", function (event) {
    var form = formOf(event);
    var p = form && parts(form);
    if (!p || !event.detail.lengthComputable || !event.detail.total) return;
    var percent = Math.round((event.detail.loaded / event.detail.total) * 100);
    if (percent <= p.bar.value) return;
    p.bar.value = percent;
    p.text.textContent = percent >= 100 ? "Sent; checking every row…" : "Sending the file… " + percent + " %";
  });

  document.addEventListener("htmx:afterRequest", function (event) {
    var form = formOf(event);
    var p = form && parts(form);
    if (p) p.box.hidden = true;
  });
})();
