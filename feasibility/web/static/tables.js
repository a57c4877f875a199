// Tables still wider than their box after the low-priority columns folded away: say so in words above the table
// ("scroll sideways"), and make the box reachable by keyboard so the arrow keys can scroll it. Checked again on resize.
(function () {
  "use strict";
  var boxes = document.querySelectorAll(".table-wrap");
  if (!boxes.length) { return; }

  function cueFor(box) {
    var cue = box.previousElementSibling;
    if (cue && cue.classList.contains("scroll-cue")) { return cue; }
    cue = document.createElement("p");
    cue.className = "scroll-cue no-print";
    cue.hidden = true;
    cue.textContent = "This table is wider than the window: scroll it sideways (or select it and use the arrow keys) to see every column.";
    box.parentNode.insertBefore(cue, box);
    return cue;
  }

  function check(box) {
    var scrolls = box.scrollWidth > box.clientWidth + 1;
    cueFor(box).hidden = !scrolls;
    box.setAttribute("data-scrolls", scrolls ? "yes" : "no");
    // A box that is not already a keyboard stop becomes one while it scrolls (a named region), and stops being one after.
    if (scrolls && !box.hasAttribute("tabindex")) {
      box.setAttribute("data-made-reachable", "yes");
      box.setAttribute("tabindex", "0");
      box.setAttribute("role", "region");
      box.setAttribute("aria-label", "Table, scrolls sideways");
    } else if (!scrolls && box.getAttribute("data-made-reachable") === "yes") {
      ["data-made-reachable", "tabindex", "role", "aria-label"].forEach(function (name) { box.removeAttribute(name); });
    }
  }

  function checkAll() { Array.prototype.forEach.call(boxes, check); }
  if (window.ResizeObserver) {
    var observer = new ResizeObserver(checkAll);
    Array.prototype.forEach.call(boxes, function (box) { observer.observe(box); });
  } else {
    window.addEventListener("resize", checkAll);
  }
  checkAll();
})();
