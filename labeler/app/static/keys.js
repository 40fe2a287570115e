// One listener per page: keys typed outside text boxes go to the server through the hidden
// key bus (a text model), numbered so that the same key twice is two changes.
if (window.__labeler_keys__ == null) {
  window.__labeler_keys__ = {n: 0};
  document.addEventListener("keydown", (ev) => {
    const el = ev.composedPath ? ev.composedPath()[0] : ev.target;
    const tag = el && el.tagName ? el.tagName.toUpperCase() : "";
    if (tag === "INPUT" || tag === "TEXTAREA" || tag === "SELECT" || (el && el.isContentEditable))
      return;
    let key = ev.key;
    if ((ev.ctrlKey || ev.metaKey) && key.toLowerCase() === "z") key = "undo";
    else if (ev.ctrlKey || ev.metaKey || ev.altKey) return;
    const known = /^[1-9]$/.test(key) || ["Enter", "s", "S", "u", "U", "r", "R", "Escape",
      "ArrowRight", "undo"].includes(key);
    if (!known) return;
    ev.preventDefault();
    window.__labeler_keys__.n += 1;
    bus.value = key + "|" + window.__labeler_keys__.n;
  });
}
