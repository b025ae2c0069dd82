// Book-in form: the rotor-type list shows the chosen customer's rotor types only. The server
// offers the same narrowed list (and refuses another customer's type); this keeps it in step
// when the customer changes without a round trip.
(function () {
  "use strict";
  var customer = document.getElementById("customer_id");
  var types = document.getElementById("rotor_type_id");
  if (!customer || !types || !types.dataset.byCustomer) { return; }
  var byCustomer = JSON.parse(types.dataset.byCustomer);
  var noneLabel = types.dataset.noneLabel || "";
  customer.addEventListener("change", function () {
    var keep = types.value;
    var list = byCustomer[customer.value] || [];
    types.innerHTML = "";
    types.add(new Option(noneLabel, "0"));
    list.forEach(function (t) {
      types.add(new Option(t[1], String(t[0]), false, String(t[0]) === keep));
    });
  });
})();
