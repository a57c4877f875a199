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
    if (scrolls && !box.hasAttribute("tabindex")) {
      box.setAttribute("tabindex", "0");
      box.setAttribute("data-tabindex-added", "yes");
      if (!box.hasAttribute("role")) { box.setAttribute("role", "region"); }
      if (!box.hasAttribute("aria-label") && !box.hasAttribute("aria-labelledby")) { box.setAttribute("aria-label", "Table, scrolls sideways"); }
    } else if (!scrolls && box.getAttribute("data-tabindex-added") === "yes") {
      box.removeAttribute("tabindex");
      box.removeAttribute("data-tabindex-added");
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
