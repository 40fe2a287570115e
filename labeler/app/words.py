"""Every sentence the page shows, as small HTML pieces styled by ``static/app.css``.

Pure functions of plain values (no Bokeh, no Project): the panels call them with what they know.
Names that come from a project (classes, recordings, annotators) are always HTML-escaped here.
"""

from __future__ import annotations

from html import escape

import numpy as np

CAUTION = ("Proposed labels are suggestions. Where labels feed clinical or safety decisions, a "
           "qualified person reviews them; local rules and licensed practice come first.")

KEYS_HELP = ("<b>Keys</b>: 1-9 confirm as class · Enter accept proposal · S skip · U undo · "
             "R review · Esc clear")

REASON_WORDS = {
    "conflict": "confirmed, but its neighbours point to another class — check the label",
    "disagreement": "annotators gave it different labels",
    "uncertain": "the proposal is unsure between two classes",
    "unexplored": "nothing confirmed nearby yet",
}

COLOUR_HINTS = {
    "label": "faint = less sure · &#9632; = confirmed · grey = no proposal yet",
    "confidence": "dark = unsure proposals, light = sure",
    "support": "dark = far from anything confirmed (unexplored)",
    "recording": "one colour per recording",
}

PICKED_FROM = {"map": "on the map", "timeline": "on the timeline", "queue": "from the review queue",
               "audit": "from the audit sample"}


def span(cls: str, text: str) -> str:
    """``text`` (already HTML) in a span of class ``cls``."""
    return f"<span class='{cls}'>{text}</span>"


def message(text: str, *, info: bool = False) -> str:
    """One line under the class pad: a refusal, or with ``info`` news."""
    return span("news" if info else "refusal", escape(text)) if text else ""


def caution() -> str:
    return f"<div class='caution'>&#9888; {escape(CAUTION)}</div>"


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
        return f"confirmed <b>{escape(s.class_names[s.confirmed[r]])}</b> by {escape(who)}"
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


def selection(n: int, source: str) -> str:
    if n == 0:
        return span("muted", "Nothing picked. Drag on the map or the timeline, or press R for the "
                             "review queue.")
    return (f"<b>{n} window{'s' if n != 1 else ''}</b> picked {PICKED_FROM[source]}"
            f" — press a class number or click a class.")


def no_classes() -> str:
    return "<i>No classes yet: type one below and press Add class.</i>"


def queue_empty(had_items: bool) -> str:
    if had_items:
        return "<i>Queue done. Press R (or click a mode) for more.</i>"
    return span("muted", "Review shows the windows worth a look next; Audit draws a random sample "
                         "for the accuracy estimate.")


def queue_item(state, item, audit: bool) -> str:
    s, r = state, item.row
    why = (f"<div class='muted'>why: {escape(reason(item.reason))}</div>" if item.reason else "")
    return (f"<div><b>{'Audit' if audit else 'Review'} {s.queue_pos + 1} of {len(s.queue)}</b>"
            f" · window {item.window_id} · {escape(s.rec_names[s.rec_code[r]])} "
            f"{s.start[r]:.1f}–{s.stop[r]:.1f} s</div><div>{window_label(s, r, audit)}</div>{why}")


def counts(state) -> str:
    s = state
    keys = {code: i + 1 for i, code in enumerate(s.active_codes()) if i < 9}
    rows = []
    for code, name, colour, conf, prop in s.counts():
        rows.append(f"<tr><td><span class='swatch' style='background:{colour}'></span></td>"
                    f"<td>{keys.get(code, '')}</td><td>{escape(name)}</td>"
                    f"<td class='num'>{conf}</td><td class='prop'>{prop}</td></tr>")
    n_conf = int((s.confirmed >= 0).sum())
    return ("<table class='counts' cellpadding='2'><tr><th></th><th>key</th>"
            "<th style='text-align:left'>class</th><th class='num'>confirmed</th>"
            f"<th class='num'>proposed</th></tr>{''.join(rows)}</table>"
            f"<div class='muted'>{n_conf} of {s.n} windows confirmed</div>")


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
    """The accuracy block (a :class:`labeler.results.AccuracyReport`): an audit's figure as the
    headline; cross-validation only as a hint."""
    from labeler.quality import MIN_AUDIT

    basis = est.basis
    acc, lo, hi = est.value, est.low, est.high
    n = int(est.n)
    if basis == "audit" and acc is not None:
        parts = [f"<b>Proposals are right {_pct(acc)} of the time</b> (95% interval "
                 f"{_pct(lo)}–{_pct(hi)})",
                 span("muted", f"rests on: an audit of {n} randomly drawn windows you labeled "
                               "without seeing the proposal")]
        ts = est.training_set
        if ts is not None and np.isfinite(ts.value):
            parts.append(f"Training set (confirmed windows counted right): {_pct(ts.value)} "
                         f"({_pct(ts.low)}–{_pct(ts.high)})")
        return "<br>".join(parts)
    head = (f"<b>No unbiased accuracy estimate yet</b> — press Audit and label {MIN_AUDIT} "
            "random windows.")
    if basis == "cross-validation" and acc is not None:
        return head + "<br>" + span("muted", (
            f"Until then, a hint only: cross-validation on {n} of your confirmed windows gives "
            f"{_pct(acc)} ({_pct(lo)}–{_pct(hi)}); optimistic, since confirmed windows are not a "
            "random sample."))
    note = est.note
    return head + ("<br>" + span("muted", escape(str(note))) if note else "")

