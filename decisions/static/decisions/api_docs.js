// The API documentation page: lists every operation of the OpenAPI schema, built in
// the browser from our own schema (no outside assets). A static file, so that the
// page is held to the same script-src 'self' policy as every other page.
"use strict";
var ops = document.getElementById("ops");
fetch(ops.dataset.schema, {headers: {"Accept": "application/json"}})
  .then(function (r) { return r.json(); })
  .then(function (schema) {
    var root = document.getElementById("ops"); root.textContent = "";
    Object.keys(schema.paths).sort().forEach(function (path) {
      var h = document.createElement("h2"); h.textContent = path; root.appendChild(h);
      var item = schema.paths[path];
      Object.keys(item).forEach(function (method) {
        var op = item[method], div = document.createElement("div"); div.className = "op";
        var m = document.createElement("span"); m.className = "m";
        m.textContent = method.toUpperCase(); div.appendChild(m);
        div.appendChild(document.createTextNode(op.summary || op.operationId || ""));
        if (op.description) { var p = document.createElement("p");
          p.textContent = op.description; div.appendChild(p); }
        (op.parameters || []).forEach(function (prm) {
          var p = document.createElement("div"); p.className = "note";
          p.textContent = prm.in + " " + prm.name + (prm.required ? " (required)" : "") +
            (prm.description ? ": " + prm.description : "");
          div.appendChild(p); });
        if (op.requestBody) { var pre = document.createElement("pre");
          pre.textContent = JSON.stringify(op.requestBody.content, null, 1).slice(0, 1500);
          div.appendChild(pre); }
        var codes = document.createElement("div"); codes.className = "note";
        codes.textContent = "responses: " + Object.keys(op.responses || {}).join(", ");
        div.appendChild(codes); root.appendChild(div);
      });
    });
  })
  .catch(function (e) { document.getElementById("ops").textContent =
    "Could not load the schema: " + e; });
