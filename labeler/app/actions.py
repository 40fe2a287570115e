"""What the keys and buttons do: confirm, undo, take a proposal, walk the review queue, manage
classes. A mixin of :class:`labeler.app.document.LabelerApp`, which holds the panels and the session
state these methods use; every method marked ``@action`` runs through ``LabelerApp.act``.
"""

from __future__ import annotations

import functools
from typing import Callable

import numpy as np

from labeler.app import words
from labeler.errors import LabelerError

#: answers beyond a class: the page's command -> Project.answer's word
ANSWER_KINDS: dict[str, str] = {cmd: kind for cmd, (_w, _k, kind) in words.ANSWERS.items()}


def action(fn: Callable) -> Callable:
    """A method the page calls: it runs through :meth:`LabelerApp.act`, which reports failures."""
    @functools.wraps(fn)
    def run(self, *args):
        return self.act(fn, self, *args)
    return run


class Actions:
    """Labeling, queue, class and key actions of one session (see the module's text)."""

    # ================================================================== labeling
    @action
    def confirm_target(self, code: int) -> None:
        """Confirm what is picked (map, timeline or queue item) as class ``code``: one batch."""
        queue_target = (self.target_source in ("queue", "audit")
                        and self.state.current_item() is not None)
        n = int(self.target_rows.size)
        changed = self.state.confirm(self.target_rows, code, self.target_source)
        self.say(f"{n} window{'s' if n != 1 else ''} → {self.state.class_names[code]}", info=True,
                 undo=True)
        self._labels_changed(changed, next_item=queue_target)

    @action
    def undo(self) -> None:
        s = self.state
        changed = s.undo()
        self.say(f"undone: {changed.size} window{'s' if changed.size != 1 else ''} back as they "
                 "were", info=True)
        back = s.queue[s.queue_pos - 1] if 0 < s.queue_pos <= len(s.queue) else None
        again = back is not None and changed.tolist() == [back.row] and not self.picking()
        if again:
            s.queue_pos -= 1                  # the review item just answered: shown again
        self._labels_changed(changed, show_item=again, at_once=True)

    def _labels_changed(self, changed: np.ndarray, *, next_item: bool = False,
                        show_item: bool = False, at_once: bool = False) -> None:
        """The tail of every write of labels: draw the changed rows (on the map's overlay until the
        annotator pauses; ``at_once``: into the map's source now, as an undo must also take
        outlines away), move the queue on (``next_item``) or show its current item
        (``show_item``) or redraw its card, retitle the signal, recount, and ask for new
        proposals."""
        if at_once:
            self._send_rows(changed)
        else:
            self._labeled(changed)
        if next_item or show_item:
            self._show_item(self.state.advance() if next_item else self.state.current_item())
        else:
            self._refresh_queue()
            self._refresh_selection()
            self._retitle_signal()
        self.later(self._refresh_counts)
        self.later(self.request_proposals)        # the worker starts after the patch has gone

    def confirm_key(self, number: int) -> None:
        codes = self.state.active_codes()
        if not codes:
            raise LabelerError("no classes yet: type a class name in the box under the classes "
                               "and press Enter")
        if not 1 <= number <= min(9, len(codes)):
            raise LabelerError(f"no class number {number}; there are {len(codes)} classes")
        self.confirm_target(codes[number - 1])

    @action
    def enter(self) -> None:
        """Enter acts on what is shown: a pick takes its proposal when it holds one only; else
        the queue's item takes its proposal."""
        if not self.picking():
            self.accept()
            return
        props = self.state.pick_proposals(self.target_rows)
        if self._blind():
            raise LabelerError("an audit is running: proposals are hidden; call the pick a class "
                               "with a class key")
        if len(props) != 1 or props[0][0] < 0:
            raise LabelerError(f"the pick holds {len(props)} different proposals; call it a class "
                               "with a class key, or Esc to let go")
        self.confirm_target(props[0][0])

    @action
    def accept(self) -> None:
        """Accept the current queue item's proposal."""
        s = self.state
        item = s.current_item()
        if item is None:
            raise LabelerError("no queue item; press R for the review queue")
        if s.queue_mode == "audit":
            raise LabelerError("audit: say what the window is with a class number (the proposal "
                               "is hidden)")
        code = int(s.proposals.proposed[item.row])
        if code < 0:
            raise LabelerError("this window has no proposal yet; pick a class number")
        self.target_rows, self.target_source = np.array([item.row]), "queue"
        self.confirm_target(code)

    @action
    def add_class_from_box(self) -> None:
        box = self.side.new_class
        self.add_class(box.value_input or box.value)

    @action
    def add_class(self, name: str) -> None:
        code = self.state.add_class(name)
        self.side.new_class.value = ""
        self._classes_changed()
        key = self.state.active_codes().index(code) + 1
        self.say(f"class {self.state.class_names[code]} added"
                 + (f"; key {key} calls it" if key <= 9 else ""), info=True)

    @action
    def manage(self, op: str) -> None:
        """The class drawer: ``rename``, ``recolour``, ``retire`` or ``merge`` its class."""
        side, s = self.side, self.state
        if not side.manage_class.value:
            raise LabelerError("no class to change yet; add one first")
        code = int(side.manage_class.value)
        name = s.class_names[code]
        if op == "recolour":
            if side.recolour.color.lower() == s.class_colours[code].lower():
                return
            s.recolour_class(code, side.recolour.color)
            said = f"{name} recoloured"
        elif op == "rename":
            new = (side.rename_box.value_input or side.rename_box.value).strip()
            s.rename_class(code, new)
            side.rename_box.value = ""
            said = f"{name} renamed {new}"
        elif op == "retire":
            s.retire_class(code)
            said = f"{name} retired: it keeps its labels and takes no new ones"
        else:
            if not side.merge_into.value:
                raise LabelerError("merge needs a second class to merge into")
            into = int(side.merge_into.value)
            changed = s.merge_class(code, into)
            self._send_rows(changed)
            said = f"{name} merged into {s.class_names[into]}: {changed.size} windows moved"
            self.request_proposals()
        self._classes_changed()
        self.say(said, info=True)

    def _classes_changed(self) -> None:
        self.classes_src.data = self._classes_data()
        args = self._class_mapper_args()
        self.class_mapper.update(palette=args["palette"], high=args["high"])
        self.side.rebuild_classes(self.state)
        self._refresh_counts()
        self._refresh_selection()
        self._refresh_queue()
        self._retitle_signal()

    # ================================================================== queue and audit
    @action
    def skip(self) -> None:
        item = self.state.current_item()
        if item is None:
            return
        if self.picking():
            raise LabelerError("your pick holds the keys; Esc goes back to the review item, then S "
                               "passes it")
        self.say(f"passed window {item.window_id}", info=True)
        self._show_item(self.state.advance())

    def _show_item(self, item) -> None:
        audit = self.state.queue_mode == "audit"
        self._set_blind(audit and item is not None)
        self._set_target([] if item is None else [item.row], "audit" if audit else "queue",
                         select_on_map=False)
        if item is not None and self.served:
            nxt = self.state.peek()
            if nxt is not None:        # the next item's signal, read while the annotator looks
                self.doc.add_next_tick_callback(lambda: self.act(self._prefetch, nxt.row))

    @action
    def start_queue(self, mode: str) -> None:
        try:
            self.state.load_queue(mode)
        finally:
            self._refresh_queue()
        self.say("" if self.state.queue else f"the {mode} queue is empty")
        self._show_item(self.state.current_item())

    # ================================================================== keys
    @action
    def press(self, key: str) -> None:
        """Handle one key from the page (see words.KEYS_HELP)."""
        self.touched()
        if len(key) == 1 and key.isdigit() and key != "0":
            self.confirm_key(int(key))
        elif key in ("Enter", "accept"):
            self.enter()
        elif key in ("s", "S", "ArrowRight", "skip"):
            self.skip()
        elif key in ("u", "U", "undo"):
            self.undo()
        elif key in ("r", "R"):
            if self.side.queue_mode.active != 0:
                self.side.queue_mode.active = 0     # loads the queue through its callback
            else:
                self.start_queue("review")
        elif key in ("Escape", "leave"):
            self.escape()
        elif key.startswith("class:"):
            self.confirm_target(int(key.split(":", 1)[1]))
        elif key.startswith("answer:") or key in ("b", "B", "n", "N"):
            kind = key.split(":", 1)[1] if ":" in key else ("between" if key in "bB" else "unsure")
            self.answer(kind)

    @action
    def answer(self, kind: str) -> None:
        """An answer beyond a class ("between" activities, "unsure") for what is shown: the queue's
        item, or the pick. Such windows count as looked at and leave the review queue; proposals
        do not learn from them."""
        if kind not in ANSWER_KINDS:
            raise LabelerError(f"no answer '{kind}'; B says between activities, N not sure")
        queue_target = (self.target_source in ("queue", "audit")
                        and self.state.current_item() is not None)
        if self.target_rows.size == 0:
            raise LabelerError("nothing to answer: press R for the review queue, or pick windows "
                               "on the map")
        n = int(self.target_rows.size)
        before = len(self.state.class_names)
        changed = self.state.answer(self.target_rows, ANSWER_KINDS[kind], self.target_source)
        if len(self.state.class_names) != before:      # the answer's class was made just now
            self._classes_changed()
        self.say(f"{n} window{'s' if n != 1 else ''} → {words.ANSWERS[kind][0]}", info=True,
                 undo=True)
        self._labels_changed(changed, next_item=queue_target)
