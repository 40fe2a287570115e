"""The side panel: what is picked (with its gallery), the feedback line, where things stand, the
look-next slip, the class shelf and the class drawer (rename, merge, retire, recolour).

The slip's answers and the shelf's rows are plain HTML buttons carrying a ``data-cmd``; the page's
one listener (``static/keys.js``) sends them over the key bus like a key, so a click and its key take
the same path. Every action runs through the app's ``@action`` methods (``document.act``: the one
place where callbacks run and failures are reported).
"""

from __future__ import annotations

from bokeh.layouts import column, row
from bokeh.models import (Button, ColorPicker, CustomJS, Div, InlineStyleSheet, RadioButtonGroup,
                          Select, TextInput, Toggle)

from labeler.app import words

SIDE_W = 400
#: after a click or Enter in a box the page gets the keys back (a digit must not type into the box)
RELEASE_JS = "window.__labeler_keys__ && window.__labeler_keys__.release();"


def _release(widget) -> None:
    if isinstance(widget, (Button, Toggle)):
        widget.js_on_event("button_click", CustomJS(code=RELEASE_JS))
    elif isinstance(widget, TextInput):
        widget.js_on_event("value_submit", CustomJS(code=RELEASE_JS))
    elif isinstance(widget, ColorPicker):
        widget.js_on_change("color", CustomJS(code=RELEASE_JS))
    else:
        raise TypeError(f"no way to hand the keys back after {type(widget).__name__}")


class SidePanel:
    def __init__(self, app, css: InlineStyleSheet, gallery_fig):
        self.app = app
        self.css = css
        self.gallery_fig = gallery_fig
        div = self.div
        self.selection = div(name="selection")
        self.queue_mode = RadioButtonGroup(labels=["Review (R)", "Audit"], active=None,
                                           sizing_mode="stretch_width", name="queue_mode")
        self.queue_mode.on_change("active", lambda _a, _o, new: None if new is None else
                                  app.start_queue("review" if new == 0 else "audit"))
        self.queue = div(name="queue_item")
        self.class_pad = div(name="class_pad")
        self.new_class = TextInput(placeholder="a new class name, then Enter",
                                   sizing_mode="stretch_width", name="new_class")
        self.add_class_btn = Button(label="add", width=70, name="add_class")
        self.add_class_btn.on_click(app.add_class_from_box)
        self.new_class.on_event("value_submit", lambda _e: app.add_class_from_box())
        self.message = div(name="message")
        self.counts = div(name="counts")
        self.estimate = div(name="estimate")
        self.progress = div(name="progress")
        self.keys = div(text=words.keys_help())
        self.drawer = self._build_drawer()
        self.drawer_toggle = Toggle(label="rename · merge · retire · recolour classes",
                                    active=False, sizing_mode="stretch_width",
                                    name="drawer_toggle")
        self.drawer_toggle.on_change("active", lambda _a, _o, new: self.open_drawer(bool(new)))
        # the opened drawer is brought into sight (it opens under the fold at 1400x900); it is
        # looked up by name: it joins the page when first opened (see open_drawer)
        self.drawer_toggle.js_on_change("active", CustomJS(code="""
            if (!cb_obj.active) return;
            const look = (k) => {
              const drawer = cb_obj.document.get_model_by_name("class_drawer");
              const v = drawer == null ? null : Bokeh.index.get_one(drawer);
              if (v && v.el && v.el.offsetHeight > 0) v.el.scrollIntoView({block: "nearest"});
              else if (k < 40) setTimeout(() => look(k + 1), 50);
            };
            look(0);"""))
        for w in (self.add_class_btn, self.new_class, self.drawer_toggle):
            _release(w)
        # where things stand first (always in sight), then the pick's gallery (only while a pick
        # holds several windows), the review slip, the classes. The gallery and the drawer join
        # the page when first shown (place_gallery, open_drawer): every model in the page is
        # views the browser builds and lays out before the page is ready
        self.box = column(
            self.selection, self.message,
            div(text=words.section("Where things stand")), self.progress, self.counts,
            self.estimate,
            div(text=words.section("Look next")), self.queue_mode, self.queue,
            div(text=words.section("Call it")), self.class_pad,
            row(self.new_class, self.add_class_btn, sizing_mode="stretch_width"),
            self.drawer_toggle, self.keys, width=SIDE_W, name="side")

    def place_gallery(self) -> None:
        """Put the gallery in the page (under the pick's summary), once."""
        kids = list(self.box.children)
        if self.gallery_fig not in kids:
            kids.insert(kids.index(self.selection) + 1, self.gallery_fig)
            self.box.children = kids

    def open_drawer(self, opened: bool) -> None:
        """Show or fold the class drawer; it joins the page when first opened."""
        kids = list(self.box.children)
        if opened and self.drawer not in kids:
            self.drawer.visible = True
            kids.insert(kids.index(self.drawer_toggle) + 1, self.drawer)
            self.box.children = kids
        else:
            self.drawer.visible = opened

    def div(self, text: str = "", name: str | None = None) -> Div:
        return Div(text=text, sizing_mode="stretch_width", name=name, stylesheets=[self.css])

    def _build_drawer(self):
        app = self.app
        wide = {"sizing_mode": "stretch_width"}
        self.manage_class = Select(title="class", options=[], name="manage_class", **wide)
        self.recolour = ColorPicker(title="colour", width=110, name="recolour")
        self.rename_box = TextInput(title="new name", name="rename_box", **wide)
        self.rename_btn = Button(label="rename", width=80, name="rename", align="end")
        self.merge_into = Select(title="merge its labels into", options=[], name="merge_into",
                                 **wide)
        self.merge_btn = Button(label="merge", width=80, name="merge", align="end")
        self.retire_btn = Button(label="retire (keeps its labels, takes no new ones)",
                                 name="retire", **wide)
        self.rename_btn.on_click(lambda: app.manage("rename"))
        self.rename_box.on_event("value_submit", lambda _e: app.manage("rename"))
        self.merge_btn.on_click(lambda: app.manage("merge"))
        self.retire_btn.on_click(lambda: app.manage("retire"))
        self.recolour.on_change("color", lambda _a, old, new: old != new and app.manage(
            "recolour"))
        self.manage_class.on_change("value", lambda _a, _o, _n: self.sync_drawer(app.state))
        for w in (self.rename_btn, self.rename_box, self.merge_btn, self.retire_btn,
                  self.recolour):
            _release(w)
        return column(row(self.manage_class, self.recolour, **wide),
                      row(self.rename_box, self.rename_btn, **wide),
                      row(self.merge_into, self.merge_btn, **wide), self.retire_btn, visible=False,
                      name="class_drawer", **wide)

    def rebuild_classes(self, state) -> None:
        """The shelf and the drawer's lists after classes changed."""
        self.class_pad.text = words.class_shelf(state)
        opts = [(str(k), state.class_names[k]) for k in state.active_codes()]
        self.manage_class.options = opts
        if self.manage_class.value not in {k for k, _ in opts}:
            self.manage_class.value = opts[0][0] if opts else ""
        self.sync_drawer(state)

    def sync_drawer(self, state) -> None:
        v = self.manage_class.value
        opts = [(str(k), state.class_names[k]) for k in state.active_codes() if str(k) != v]
        self.merge_into.options = opts
        if self.merge_into.value not in {k for k, _ in opts}:
            self.merge_into.value = opts[0][0] if opts else ""
        if v:
            self.recolour.color = state.class_colours[int(v)]

    def show_queue(self, state, item, *, paused: bool, answers: tuple[str, ...]) -> None:
        """The slip for ``item`` (None: the queue is empty or done); ``paused``: a pick holds the
        keys and the slip waits."""
        if item is None:
            self.queue.text = words.queue_empty(bool(state.queue))
            return
        self.queue.text = words.queue_item(state, item, state.queue_mode == "audit",
                                           paused=paused, answers=answers)

    def say(self, text: str, *, info: bool = False, undo: bool = False) -> None:
        self.message.text = words.message(text, info=info, undo=undo)
