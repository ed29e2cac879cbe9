// Starts the OpenAPI viewer on /docs. Everything it loads comes from this service:
// the document named by data-spec-url, and requests made with "Try it out".
window.addEventListener("load", function () {
  "use strict";
  var root = document.getElementById("api-docs");
  window.ui = SwaggerUIBundle({
    url: root.getAttribute("data-spec-url"),
    dom_id: "#api-docs",
    presets: [SwaggerUIBundle.presets.apis],
    layout: "BaseLayout",
    deepLinking: true,
    validatorUrl: null,
    defaultModelsExpandDepth: 0,
    displayRequestDuration: true,
    supportedSubmitMethods: ["get", "post", "options"],
  });
});
