// Shop settings: a live sample of the job-number pattern. The server renders it (one
// rule, one place); a static file because the CSP refuses inline scripts.
(function () {
  "use strict";
  var input = document.getElementById("job_number_pattern");
  var out = document.getElementById("job-number-sample");
  var err = document.getElementById("job-number-sample-error");
  if (!input || !out || !err || !input.dataset.sampleUrl) { return; }
  var timer = null;
  input.addEventListener("input", function () {
    clearTimeout(timer);
    timer = setTimeout(function () {
      var url = input.dataset.sampleUrl + "?pattern=" + encodeURIComponent(input.value);
      fetch(url, {headers: {"Accept": "application/json"}, credentials: "same-origin"})
        .then(function (r) { return r.json(); })
        .then(function (d) { out.textContent = d.sample || "—"; err.textContent = d.error || ""; })
        .catch(function () {});
    }, 250);
  });
})();
