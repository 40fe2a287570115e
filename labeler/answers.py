"""Answers that are not an activity: "mixed / between activities" and "not sure".

A window that spans two activities, or one the annotator cannot tell, gets one of these answers
instead of a class. Each answer is kept as a class of its own with a reserved name in parentheses
(user class names never take that form), so it is recorded as events like every other decision
(who, when, from where; undo works) and counts as looked at: it does not come back in the review
queue. It is not an activity: proposals do not learn from it, the audit does not score it, and the
training set leaves such windows out unless asked to keep them.
"""

from __future__ import annotations

from labeler.errors import InputError

#: answer -> the reserved class name that carries it
ANSWERS: dict[str, str] = {"mixed": "(mixed)", "unsure": "(not sure)"}
#: grey: not one of the activity colours
ANSWER_COLOUR = "#999999"


def answer_class(answer: str) -> str:
    """The reserved class name of ``answer`` ("mixed" or "unsure")."""
    key = str(answer).strip().lower().replace(" ", "").replace("-", "").replace("_", "")
    key = {"notsure": "unsure", "between": "mixed"}.get(key, key)
    if key not in ANSWERS:
        raise InputError(f"unknown answer {answer!r}; use 'mixed' (the window spans activities) "
                         "or 'unsure' (cannot tell)")
    return ANSWERS[key]


def is_answer(class_name) -> bool:
    """Whether ``class_name`` is the reserved name of an answer (not an activity)."""
    return str(class_name) in ANSWERS.values()


def is_reserved(class_name: str) -> bool:
    """Names in parentheses are kept for answers; a user class cannot take one."""
    name = str(class_name).strip()
    return name.startswith("(") and name.endswith(")")
