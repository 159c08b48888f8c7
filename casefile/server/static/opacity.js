// The map-strength control: move the slider and the map layer follows at once (without JavaScript the
// Apply button reloads the page at the chosen strength).
document.addEventListener("DOMContentLoaded", function () {
  var range = document.getElementById("opacity");
  var layer = document.getElementById("layer");
  var shown = document.getElementById("opacity-value");
  var apply = document.getElementById("apply-opacity");
  if (!range || !layer) { return; }
  if (apply) { apply.hidden = true; }
  function follow() {
    layer.style.opacity = String(Number(range.value) / 100);
    if (shown) { shown.textContent = range.value + " %"; }
  }
  range.addEventListener("input", follow);
  range.addEventListener("change", follow);
});
