// Upload progress for forms that name a <progress> element in data-upload-progress. htmx reports
// the request's progress events; without script the form posts plainly and the bar stays hidden.
(function () {
  "use strict";

  function bar(event) {
    var form = event.target && event.target.closest && event.target.closest("[data-upload-progress]");
    return form ? document.getElementById(form.getAttribute("data-upload-progress")) : null;
  }

  document.addEventListener("htmx:xhr:loadstart", function (event) {
    var progress = bar(event);
    if (!progress) return;
    progress.value = 0;
    progress.textContent = "0 %";
    progress.hidden = false;
  });

  document.addEventListener("htmx:xhr:progress", function (event) {
    var progress = bar(event);
    if (!progress || !event.detail.lengthComputable || !event.detail.total) return;
    var pct = Math.round((100 * event.detail.loaded) / event.detail.total);
    progress.value = pct;
    progress.textContent = pct + " %";
  });
})();
