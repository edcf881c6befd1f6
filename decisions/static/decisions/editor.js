// Live validation of the model editors: after a pause in typing, post the form to
// the page's validate endpoint (nothing is saved) and show the valuation core's
// messages beside the fields they name. The server stays the authority: saving
// re-checks everything, and the page works without this script.
(function () {
  "use strict";
  var form = document.getElementById("model-form");
  if (!form || !window.fetch || !window.FormData) { return; }
  var url = form.getAttribute("data-validate-url");
  var status = document.getElementById("live-status");
  var box = document.getElementById("general-problems");
  var list = document.getElementById("general-list");
  var timer = null;
  var seq = 0;

  function setList(ul, items) {
    while (ul.firstChild) { ul.removeChild(ul.firstChild); }
    items.forEach(function (text) {
      var li = document.createElement("li");
      li.textContent = text;
      ul.appendChild(li);
    });
  }

  function show(body) {
    form.querySelectorAll("ul.field-errors").forEach(function (ul) {
      var name = ul.id.replace(/^err-/, "");
      var items = body.errors[name] || [];
      setList(ul, items);
      var input = form.querySelector('[name="' + name + '"]');
      if (input) {
        input.classList.toggle("invalid", items.length > 0);
        if (items.length) { input.setAttribute("aria-invalid", "true"); }
        else { input.removeAttribute("aria-invalid"); }
      }
    });
    setList(list, body.general || []);
    box.hidden = !(body.general && body.general.length);
    if (body.ok) {
      status.className = "live-status ok";
      status.textContent = "Valid. Expected value " + body.expected_value + ". " + (body.plan || "");
    } else {
      var count = (body.general || []).length;
      Object.keys(body.errors).forEach(function (k) { count += body.errors[k].length; });
      status.className = "live-status bad";
      status.textContent = count + " problem" + (count === 1 ? "" : "s") + " to fix before saving.";
    }
  }

  function check() {
    var mine = ++seq;
    var data = new FormData(form);
    fetch(url, {
      method: "POST", body: data, credentials: "same-origin",
      headers: {"X-CSRFToken": data.get("csrfmiddlewaretoken"), "Accept": "application/json"}
    }).then(function (r) {
      if (!r.ok) { throw new Error("the check answered " + r.status); }
      return r.json();
    }).then(function (body) {
      if (mine === seq) { show(body); }  // ignore answers overtaken by newer typing
    }).catch(function (e) {
      status.className = "live-status";
      status.textContent = "Live check unavailable (" + e.message + "); saving still checks.";
    });
  }

  form.addEventListener("input", function () {
    clearTimeout(timer);
    timer = setTimeout(check, 400);
  });
})();
