"""Every sentence the page shows, as small HTML pieces styled by ``static/app.css``.

Pure functions of plain values (no Bokeh, no Project): the panels call them with what they know.
Names that come from a project (classes, recordings, annotators) are always HTML-escaped here.
"""

from __future__ import annotations

from html import escape

import numpy as np

from labeler.answers import ANSWERS as ANSWER_CLASSES, is_answer

CAUTION = ("Proposed labels are suggestions. Where labels feed clinical or safety decisions, a "
           "qualified person reviews them; local rules and licensed practice come first.")

KEYS_HELP = ("<b>Keys</b>: 1-9 call what is shown that class · Enter take the suggestion · "
             "B between activities · N not sure · S pass · U undo · R review · "
             "Esc leave the pick, then the review")

#: the map's shapes (map_view.SHAPES) as characters, for the shelf and the slip
SHAPE_MARKS = ("&#9679;", "&#9650;", "&#9670;", "&#9660;", "&#11042;", "&#9733;", "&#9688;",
               "&#10010;")

#: answers beyond a class: command -> (words, key, Project.answer's word)
ANSWERS = {"between": ("between activities", "B", "mixed"), "unsure": ("not sure", "N", "unsure")}

REASON_WORDS = {
    "conflict": "confirmed, but its neighbours point to another class — check the label",
    "disagreement": "annotators gave it different labels",
    "uncertain": "the proposal is unsure between two classes",
    "unexplored": "few confirmations reach it, so its proposal is a guess from afar",
}

COLOUR_HINTS = {
    "label": "colour + shape = class · bigger = surer · outlined = confirmed · grey = nothing yet",
    "confidence": "dark = unsure proposals, light = sure (bar at the right)",
    "support": "dark = far from anything confirmed, unexplored (bar at the right)",
    "recording": "one colour per recording (a scale of its own)",
}

PICKED_FROM = {"map": "on the map", "timeline": "on the timeline", "queue": "from the review queue",
               "audit": "from the audit sample"}


def answer_words(class_name: str) -> str:
    """What the page calls a class: an answer's words ("between activities"), else its name."""
    for text, _key, kind in ANSWERS.values():
        if ANSWER_CLASSES[kind] == class_name:
            return text
    return class_name


def span(cls: str, text: str) -> str:
    """``text`` (already HTML) in a span of class ``cls``."""
    return f"<span class='{cls}'>{text}</span>"


def message(text: str, *, info: bool = False, undo: bool = False) -> str:
    """The feedback line: a refusal, or with ``info`` news; ``undo`` adds the way back."""
    if not text:
        return ""
    back = (" <button class='link' data-cmd='undo'>U undoes</button>" if undo else "")
    return span("news" if info else "refusal", escape(text)) + back


def caution() -> str:
    """The caution, one line, folded by a click on its mark (and unfolded the same way)."""
    return (f"<details class='caution' open><summary title='fold or unfold the caution'>"
            f"&#9888;</summary>{escape(CAUTION)}</details>")


def keys_help() -> str:
    return f"<span class='keys'>{KEYS_HELP}</span>"


def keycap(key: str) -> str:
    return f"<kbd>{escape(key)}</kbd>"


def mark(state, code: int, per_shape: int = 8) -> str:
    """The class's look on the map: its shape in its colour."""
    if code < 0:
        return "<span class='mark' style='color:#BDBDBD'>&#9679;</span>"
    return (f"<span class='mark' style='color:{state.class_colours[code]}'>"
            f"{SHAPE_MARKS[(code // per_shape) % len(SHAPE_MARKS)]}</span>")


def class_name(state, code: int) -> str:
    return escape(state.class_names[code]) if code >= 0 else "no proposal"


def class_shelf(state) -> str:
    """One row per active class: its look, name, counts and, at the far end, its key."""
    if not state.active_codes():
        return no_classes()
    counts = {code: (conf, prop) for code, _n, _c, conf, prop in state.counts()}
    rows = []
    for i, code in enumerate(state.active_codes()):
        conf, prop = counts.get(code, (0, 0))
        key = keycap(str(i + 1)) if i < 9 else ""
        rows.append(f"<button class='shelf-row' data-cmd='class:{code}' name='class_{i + 1}'>"
                    f"{mark(state, code)}<span class='nm'>{escape(state.class_names[code])}</span>"
                    f"<span class='ct' title='confirmed · proposed'>{conf} &#10003; · {prop} "
                    f"~</span>{key}</button>")
    return f"<div class='shelf'>{''.join(rows)}</div>"


def gallery_caption(state, r: int) -> str:
    """A gallery cell's caption (plain text: drawn on the canvas, never parsed as HTML)."""
    s = state
    if s.confirmed[r] >= 0:
        return f"✓ {answer_words(s.class_names[s.confirmed[r]])}"
    p = s.proposals.proposed[r]
    return f"{s.class_names[p]} {s.proposals.confidence[r]:.2f}" if p >= 0 else "no proposal"


def colour_hint(mode: str) -> str:
    return span("muted", COLOUR_HINTS[mode])


def header(file_name: str, n_recordings: int, hours: float, n_windows: int, map_kind: str,
           draw: str, annotator: str) -> str:
    drawn = "WebGL" if draw == "webgl" else "canvas (no GPU found)"
    return (f"<div class='title'><span class='name'>labeler</span>"
            f"<span>{escape(file_name)}</span>"
            f"<span class='muted'>{n_recordings} recording(s) · {hours:.2f} h · {n_windows} windows"
            f" · map: {escape(map_kind)} · drawn with {drawn}</span>"
            f"<span class='who'>annotator <b>{escape(annotator)}</b></span></div>")


def section(title: str) -> str:
    return f"<div class='head'>{escape(title)}</div>"


def reason(reason: str) -> str:
    return REASON_WORDS.get(reason, reason)


def window_label(state, r: int, hide_proposal: bool = False) -> str:
    """What is known of window row ``r``: its confirmed class, else its proposal (unless hidden)."""
    s = state
    if s.confirmed[r] >= 0:
        who = s.annotators[s.who[r]] if s.who[r] >= 0 else "?"
        name = s.class_names[s.confirmed[r]]
        if is_answer(name):
            return f"answered <b>{escape(answer_words(name))}</b> by {escape(who)}"
        return f"confirmed <b>{escape(name)}</b> by {escape(who)}"
    if hide_proposal:
        return "proposal hidden (audit)"
    p = s.proposals.proposed[r]
    if p >= 0:
        return (f"proposed <b>{escape(s.class_names[p])}</b> "
                f"(confidence {s.proposals.confidence[r]:.2f})")
    return "no proposal yet"


def signal_idle() -> str:
    return ("<b>Signal</b> " + span("muted", "— pick a window on the map, the timeline or the "
                                              "queue"))


def signal_title(state, r: int, hide_proposal: bool) -> str:
    s = state
    k = int(s.rec_code[r])
    return (f"<b>Signal</b> · window {int(s.ids[r])} · {escape(s.rec_names[k])} · "
            f"{s.start[r]:.1f}–{s.stop[r]:.1f} s · {window_label(s, r, hide_proposal)}")


def selection(state, n: int, source: str, proposals: list[tuple[int, int]] | None = None,
              hidden: bool = False, rows=None) -> str:
    """The pick: how many windows, from where, and how many different proposals they hold."""
    if n == 0:
        return start_here(state)
    head = f"<b>{n} window{'s' if n != 1 else ''}</b> picked {PICKED_FROM[source]}"
    if source in ("queue", "audit") or not proposals:
        return f"<div class='pick'>{head}</div>"
    if hidden:
        return f"<div class='pick'>{head} · proposals hidden while the audit runs</div>"
    kinds = len(proposals)
    parts = ", ".join(f"{mark(state, c)} {class_name(state, c)} {k}" for c, k in proposals[:4])
    more = f", {kinds - 4} more" if kinds > 4 else ""
    hint = (f"{keycap('Enter')} takes <b>{class_name(state, proposals[0][0])}</b> for all"
            if kinds == 1 and proposals[0][0] >= 0 else "a class key calls them all one class")
    hint += f" · {keycap('B')} between activities · {keycap('N')} not sure"
    return (f"<div class='pick'>{head} · <b>{kinds}</b> different proposal"
            f"{'s' if kinds != 1 else ''}<div class='muted'>{parts}{more}</div>"
            f"{confirmed_in_pick(state, rows)}"
            f"<div class='muted'>{hint} · {keycap('Esc')} lets go</div></div>")


def confirmed_in_pick(state, rows) -> str:
    """How many of the picked windows carry a label already, and which."""
    if rows is None:
        return ""
    got = state.confirmed[np.asarray(rows, dtype=np.int64)]
    got = got[got >= 0]
    if got.size == 0:
        return ""
    codes, k = np.unique(got, return_counts=True)
    order = np.argsort(-k, kind="stable")
    names = [answer_words(state.class_names[c]) for c in codes]
    parts = ", ".join(f"{mark(state, int(codes[i]))} {escape(names[i])} {int(k[i])}"
                      for i in order[:4])
    more = f", {len(order) - 4} more" if len(order) > 4 else ""
    return f"<div>already labeled: {parts}{more}</div>"


def start_here(state) -> str:
    """What to do next when nothing is picked."""
    s = state
    if not s.active_codes():
        first = "type a class name in the box under <b>Call it</b> and press Enter, then"
        return (f"<div class='pick'><b>Start here</b>: {first} drag a box on the map around "
                "windows of that activity and press its number.</div>")
    open_ = (s.confirmed < 0) & (s.proposals.proposed >= 0)
    unsure = int((open_ & (s.proposals.confidence < 0.6)).sum())
    none = int(((s.confirmed < 0) & (s.proposals.proposed < 0)).sum())
    left = []
    if unsure:
        left.append(f"{unsure} proposals below 0.6 confidence")
    if none:
        left.append(f"{none} windows with no proposal")
    tail = f"<div class='muted'>Still open: {', '.join(left)}.</div>" if left else ""
    return (f"<div class='pick'><b>Next</b>: {keycap('R')} brings the windows worth a look, one "
            f"at a time ({keycap('1')}-{keycap('9')} calls it, {keycap('Enter')} takes the "
            f"suggestion, {keycap('B')} / {keycap('N')} when it is neither); or drag a box on "
            f"the map and call the whole pick.{tail}</div>")


def no_classes() -> str:
    return "<i>No classes yet: type one in the box below and press Enter.</i>"


def queue_empty(had_items: bool) -> str:
    if had_items:
        return "<i>Queue done. Press R (or click Review) for more.</i>"
    return span("muted", "Review shows the windows worth a look next; Audit draws a random sample "
                         "for the accuracy estimate.")


def _answer(cmd: str, text: str, key: str, disabled: bool = False) -> str:
    off = " disabled" if disabled else ""
    return f"<button class='ans' data-cmd='{cmd}'{off}>{text} {keycap(key)}</button>"


def queue_item(state, item, audit: bool, *, paused: bool = False,
               answers: tuple[str, ...] = ()) -> str:
    """The look-next slip: where the window is, why it is here, what is suggested, the answers."""
    s, r = state, item.row
    why = (f"<div class='muted'>why: {escape(reason(item.reason))}</div>" if item.reason else "")
    if item.labels and not audit:
        said = " · ".join(f"{escape(who)}: <b>{escape(answer_words(label))}</b>"
                          for who, label in item.labels)
        why += f"<div class='said'>{said}</div>"
    head = (f"<div class='slip-head'><b>{'Audit' if audit else 'Review'} {s.queue_pos + 1} of "
            f"{len(s.queue)}</b> · window {item.window_id} · {escape(s.rec_names[s.rec_code[r]])} "
            f"{s.start[r]:.1f}–{s.stop[r]:.1f} s</div>")
    if paused:
        return (f"<div class='slip paused'>{head}<div>paused while you work on your pick · "
                f"{keycap('Esc')} comes back here</div></div>")
    p = int(s.proposals.proposed[r])
    if audit or s.confirmed[r] >= 0 or p < 0:
        say = f"<div>{window_label(s, r, audit)}</div>"
    else:
        say = (f"<div class='say'>suggests {mark(s, p)} <b>{class_name(s, p)}</b> · confidence "
               f"{s.proposals.confidence[r]:.2f}</div>")
    row = [] if audit else [_answer("accept", "that's it", "Enter", disabled=p < 0)]
    row.append(_answer("skip", "pass", "S"))
    row += [_answer(f"answer:{a}", ANSWERS[a][0], ANSWERS[a][1]) for a in answers if a in ANSWERS]
    return (f"<div class='slip'>{head}{why}{say}<div class='answers'>{''.join(row)}</div>"
            f"<div class='muted'>or a class key for another class · {keycap('Esc')} leaves</div>"
            f"</div>")


def counts(state) -> str:
    s = state
    n_labeled = int((s.confirmed >= 0).sum())
    n_conf = int(s.learned().sum())
    n_prop = int(((s.confirmed < 0) & (s.proposals.proposed >= 0)).sum())
    answered = (f" · {n_labeled - n_conf} answered between / not sure"
                if n_labeled > n_conf else "")
    return span("muted", f"{n_conf} of {s.n} windows confirmed{answered} · {n_prop} more "
                         "proposed")


def proposals_running(since: str) -> str:
    return span("busy", f"&#8635; updating proposals in the background (since {since}) — keep "
                        "labeling")


def proposals_ready(note: str = "", stored: bool = False) -> str:
    if stored:
        return span("done", "&#10003; proposals up to date (stored in the project)")
    when = f" ({escape(note)})" if note else ""
    return span("done", f"&#10003; proposals up to date{when}")


def proposals_failed(why: str) -> str:
    return span("refusal", f"proposals failed: {escape(why)}")


def no_proposals() -> str:
    return span("muted", "no proposals yet")


def no_estimate(why: str | None = None) -> str:
    """No estimate: why (a line from the project), or that it comes with the proposals."""
    return span("muted", escape(why) if why else
                "Accuracy estimate: none yet — it comes with the proposals.")


def _pct(v) -> str:
    return f"{float(v):.0%}"


def estimate(est) -> str:
    """The accuracy block (a :class:`labeler.results.AccuracyReport`, the same object
    `labeler accuracy` prints and the export's manifest carries): the headline with its interval,
    and, folded under it, what it rests on (or what is missing for a figure)."""
    acc, lo, hi = est.value, est.low, est.high
    note = escape(str(est.note or ""))
    if est.basis == "none" or acc is None:
        todo = ("<br>For a figure now: press <b>Audit</b> and label each of the windows it shows; "
                "the figure follows the answers." if getattr(est, "needs_audit", False) else "")
        return (f"<details class='est'><summary><b>No accuracy figure yet</b> "
                f"{span('muted', '(why)')}</summary>{span('muted', note)}</details>"
                + todo.removeprefix("<br>"))
    parts = []
    if est.expected_wrong is not None:
        parts.append(f"About {est.expected_wrong:.0f} proposals expected wrong")
    ts = est.training_set
    if ts is not None and np.isfinite(ts.value):
        parts.append(f"Training set (confirmed windows counted right): {_pct(ts.value)} "
                     f"({_pct(ts.low)}–{_pct(ts.high)})")
    parts.append(span("muted", "rests on: " + note))
    advice = ("The interval is wide: press <b>Audit</b> and label each of the windows it shows "
              "to narrow it." if getattr(est, "audit_advised", False) else "")
    return (f"<details class='est'><summary><b>Proposals are right about {_pct(acc)} of the "
            f"time</b> (95% interval {_pct(lo)}–{_pct(hi)})</summary>{'<br>'.join(parts)}"
            "</details>" + advice)
