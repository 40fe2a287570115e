// One listener per page: keys typed outside text boxes, and clicks on page buttons carrying a
// data-cmd, go to the server through the hidden key bus (a text model), numbered so that the same
// command twice is two changes. Esc in a text box hands the keys back to the page.
if (window.__labeler_keys__ == null) {
  const keys = window.__labeler_keys__ = {n: 0};
  keys.send = (cmd) => { keys.n += 1; bus.value = cmd + "|" + keys.n; };
  // the element that has the focus, through shadow roots
  const focused = () => {
    let el = document.activeElement;
    while (el && el.shadowRoot && el.shadowRoot.activeElement) el = el.shadowRoot.activeElement;
    return el;
  };
  keys.release = () => {
    const el = focused();
    if (el && el !== document.body && el.blur) el.blur();
  };
  const KNOWN = ["Enter", "s", "S", "u", "U", "r", "R", "b", "B", "n", "N", "Escape",
                 "ArrowRight", "undo"];
  document.addEventListener("keydown", (ev) => {
    const el = ev.composedPath ? ev.composedPath()[0] : ev.target;
    const tag = el && el.tagName ? el.tagName.toUpperCase() : "";
    if (tag === "INPUT" || tag === "TEXTAREA" || tag === "SELECT" || (el && el.isContentEditable)) {
      if (ev.key === "Escape") { ev.preventDefault(); el.blur(); }
      return;
    }
    let key = ev.key;
    if ((ev.ctrlKey || ev.metaKey) && key.toLowerCase() === "z") key = "undo";
    else if (ev.ctrlKey || ev.metaKey || ev.altKey) return;
    if (!(/^[1-9]$/.test(key) || KNOWN.includes(key))) return;
    ev.preventDefault();
    keys.send(key);
  });
  document.addEventListener("click", (ev) => {
    const path = ev.composedPath ? ev.composedPath() : [ev.target];
    for (const el of path) {
      if (el && el.dataset && el.dataset.cmd) {
        ev.preventDefault();
        if (!el.disabled) keys.send(el.dataset.cmd);
        if (el.blur) el.blur();
        return;
      }
    }
  });
}
