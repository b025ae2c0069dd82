// Proving-test form: when the proving rotor changes, put that rotor's proposed figures in
// the fields (the server does the same when the script does not run).
(function () {
  "use strict";
  var select = document.getElementById("proving_rotor_id");
  var marker = document.getElementById("figures_for");
  if (!select || !marker || !select.dataset.figures) { return; }
  var figures = JSON.parse(select.dataset.figures);
  select.addEventListener("change", function () {
    var f = figures[select.value];
    if (!f) { return; }
    Object.keys(f).forEach(function (name) {
      var input = document.getElementById(name);
      if (input) { input.value = f[name]; }
    });
    marker.value = select.value;
  });
})();
