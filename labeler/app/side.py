"""The side panel: what is picked, the class pad, the review queue card, counts, estimate, status.

Widgets and their texts only; every button calls an action of the app (``document.action``: the one
place where callbacks run and failures are reported).
"""

from __future__ import annotations

from bokeh.layouts import column, row
from bokeh.models import Button, Div, InlineStyleSheet, RadioButtonGroup, TextInput

from labeler.app import words

SIDE_W = 420


class SidePanel:
    def __init__(self, app, css: InlineStyleSheet):
        self.app = app
        self.css = css
        div = self.div
        self.selection = div(name="selection")
        self.class_pad = column(width=SIDE_W, name="class_pad")
        self.new_class = TextInput(placeholder="new class name", width=SIDE_W - 120,
                                   name="new_class")
        self.add_class_btn = Button(label="Add class", width=100, name="add_class")
        self.add_class_btn.on_click(app.add_class_from_box)
        self.new_class.on_event("value_submit", lambda _e: app.add_class_from_box())
        self.undo_btn = Button(label="Undo last batch (U)", width=SIDE_W, name="undo")
        self.undo_btn.on_click(app.undo)
        self.queue_mode = RadioButtonGroup(labels=["Review (R)", "Audit"], active=None,
                                           width=SIDE_W, name="queue_mode")
        self.queue_mode.on_change("active", lambda _a, _o, new: None if new is None else
                                  app.start_queue("review" if new == 0 else "audit"))
        self.queue = div(name="queue_item")
        self.accept_btn = Button(label="Accept proposal (Enter)", width=SIDE_W // 2 - 4,
                                 button_type="success", name="accept")
        self.accept_btn.on_click(app.accept)
        self.skip_btn = Button(label="Skip (S)", width=SIDE_W // 2 - 4, name="skip")
        self.skip_btn.on_click(app.skip)
        self.counts = div(name="counts")
        self.estimate = div(name="estimate")
        self.progress = div(name="progress")
        self.message = div(name="message")
        self.keys = div(text=f"<span class='keys'>{words.KEYS_HELP}</span>")
        self.box = column(
            div(text=words.section("1 · Pick windows")), self.selection,
            div(text=words.section("2 · Say what they are")), self.class_pad,
            row(self.new_class, self.add_class_btn), self.undo_btn, self.message,
            div(text=words.section("Next to look at")), self.queue_mode, self.queue,
            row(self.accept_btn, self.skip_btn),
            div(text=words.section("Where things stand")), self.progress,
            self.counts, self.estimate, self.keys, width=SIDE_W, name="side")

    def div(self, text: str = "", name: str | None = None) -> Div:
        return Div(text=text, width=SIDE_W, name=name, stylesheets=[self.css])

    def rebuild_class_pad(self, state) -> None:
        buttons = []
        for i, code in enumerate(state.active_codes()):
            key = f"{i + 1}" if i < 9 else "·"
            colour = state.class_colours[code]
            css = (f".bk-btn {{ border-left: 10px solid {colour}; text-align: left; "
                   f"font-size: 13px; }}")
            b = Button(label=f"{key}  {state.class_names[code]}", width=SIDE_W // 2 - 4,
                       stylesheets=[InlineStyleSheet(css=css)], name=f"class_{i + 1}")
            b.on_click(lambda c=code: self.app.confirm_target(c))
            buttons.append(b)
        rows = [row(*buttons[i:i + 2]) for i in range(0, len(buttons), 2)]
        self.class_pad.children = rows or [self.div(words.no_classes())]

    def show_queue(self, state, item) -> None:
        """The queue card for ``item`` (None: the queue is empty or done)."""
        audit = state.queue_mode == "audit"
        if item is None:
            self.queue.text = words.queue_empty(bool(state.queue))
            self.accept_btn.disabled = self.skip_btn.disabled = True
            return
        self.queue.text = words.queue_item(state, item, audit)
        self.accept_btn.disabled = audit or state.proposals.proposed[item.row] < 0
        self.skip_btn.disabled = False

    def say(self, text: str, *, info: bool = False) -> None:
        self.message.text = words.message(text, info=info)
