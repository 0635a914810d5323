// Starts the vendored Swagger UI on /docs against this application's OpenAPI document.
window.addEventListener("DOMContentLoaded", function () {
  window.SwaggerUIBundle({
    url: document.getElementById("api-docs").dataset.openapiUrl,
    dom_id: "#api-docs",
    deepLinking: true,
  });
});
