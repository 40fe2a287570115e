// A Div whose text changes draws its new text in place. Left as it comes, every change of a
// Div's text lays out the whole page again (every figure measures its axes and labels): 50-200 ms
// per changed Div, several per key press. The Div is drawn again and its own sizing applied; a
// Div whose new text changes its size still lays out what moved, through the resize observer
// its parent keeps on it. Patched once per page, on the prototype of the page's Divs' views.
const view = Bokeh.index.get_one(div);
const proto = view == null ? null : Object.getPrototypeOf(view);
if (proto != null && !Object.prototype.hasOwnProperty.call(proto, "__text_in_place__")) {
  proto.__text_in_place__ = true;
  proto.rerender = function () {
    this.render();
    this.r_after_render();
    this.update_layout();
  };
}
