// Behaviour for every page that plain HTML cannot express. The pages work without it.
(function () {
  "use strict";

  function showNotice(text) {
    var area = document.getElementById("notice");
    if (!area) return;
    var message = document.createElement("p");
    message.className = "notice notice--error";
    message.textContent = text;
    area.replaceChildren(message);
  }

  // A request the server refused with no form to show (for example a record deleted meanwhile):
  // show the server's own message if it sent one, else a plain fallback.
  document.addEventListener("htmx:responseError", function (event) {
    var xhr = event.detail.xhr;
    var text = "";
    var page = new DOMParser().parseFromString(xhr.responseText || "", "text/html");
    var found = page.querySelector("[data-error-message]");
    if (found) text = found.textContent.trim();
    showNotice(text || "The server could not do this (status " + xhr.status + "). Reload the page and try again.");
  });

  document.addEventListener("htmx:sendError", function () {
    showNotice("The server could not be reached. Check the connection and try again.");
  });

  // A link that opens a row in place (an offer's history) closes it when used again,
  // instead of asking the server for a second copy.
  document.addEventListener("htmx:confirm", function (event) {
    var trigger = event.detail.elt;
    var id = trigger && trigger.getAttribute && trigger.getAttribute("data-toggles");
    if (!id) return;
    var opened = document.getElementById(id);
    if (opened) {
      event.preventDefault();
      opened.remove();
      trigger.setAttribute("aria-expanded", "false");
    } else {
      trigger.setAttribute("aria-expanded", "true");
    }
  });

  // Print buttons are hidden until there is a script to make them work.
  document.addEventListener("DOMContentLoaded", function () {
    document.querySelectorAll("[data-print]").forEach(function (button) {
      button.hidden = false;
      button.addEventListener("click", function () {
        window.print();
      });
    });
  });

  // A new request makes an old notice misleading.
  document.addEventListener("htmx:beforeRequest", function () {
    var area = document.getElementById("notice");
    if (area) area.replaceChildren();
  });
})();
