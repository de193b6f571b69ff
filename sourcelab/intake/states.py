"""Recording states and procedures from annotations.

Clinical recordings mark *states* with zero-duration markers ("eyes open", "eyes closed",
"awake", "asleep") and *procedures* with runs of markers ("HV START" ... "HV END", "PHOTO 2Hz" ...
"PHOTO 20Hz", "POST HV 00:30").  A state lasts until the next marker that changes what the
person is doing (another state, a procedure, a seizure, a task such as counting aloud); comments
("stretching", "blinking") do not end it.  Procedure spans are never part of a resting-state
selection.

Everything here is a pure function over (onset, duration, description) lists in seconds from
the first sample; :func:`sourcelab.intake.clean.selection_mask` turns the spans into samples.

Wordings recognised (case-insensitive; regular expressions in :data:`PATTERNS`) were collected
from common clinical EEG practice and from the 114 annotations of the eeghdf 0.2.4 example
recording ("PHOTO 2Hz", "HV START", "HV 01:30", "POST HV 00:30", "SZ START" ...).
"""

from __future__ import annotations

import re
from dataclasses import dataclass

#: Kinds of marker.  ``state`` and the procedure/event kinds end a state; ``comment`` does not.
PROCEDURES = ("hyperventilation", "post-hyperventilation", "photic stimulation", "seizure")

#: (kind, pattern).  Order matters: the first match wins (post-HV before HV; "sleep spindles" is
#: an EEG feature, not a state).
PATTERNS: tuple[tuple[str, re.Pattern], ...] = tuple(
    (k, re.compile(p, re.IGNORECASE))
    for k, p in (
        ("comment", r"spindle|vertex|k[\s-]?complex"),
        (
            "post-hyperventilation",
            r"post[\s_-]*(hv|hyperv|hpv)|after[\s_-]*(hv|hyperv)|"
            r"(hv|hyperventilation)[\s_-]*recovery",
        ),
        ("hyperventilation", r"(^|[^a-z])hv([^a-z]|$)|hyperv|(^|[^a-z])hpv([^a-z]|$)|overbreath"),
        (
            "photic stimulation",
            r"photic|(^|[^a-z])photo|(^|[^a-z])ips([^a-z]|$)|flash|strobe|"
            r"light[\s_-]*stim|(^|[^a-z])ls\s*\d+\s*hz|^\s*\d+(\.\d+)?\s*hz\s*$",
        ),
        ("seizure", r"(^|[^a-z])sz([^a-z]|$)|seizure|(^|[^a-z])ictal"),
        ("eyes open", r"eyes?[\s_-]*(are[\s_-]*)?open|(^|[^a-z])eo([^a-z]|$)"),
        ("eyes closed", r"eyes?[\s_-]*(are[\s_-]*)?(closed?|closing|shut)|(^|[^a-z])ec([^a-z]|$)"),
        ("awake", r"awake|awaken|(^|[^a-z])wake|arous"),
        ("asleep", r"asleep|sleep|drows|(^|[^a-z])nap([^a-z]|$)|(^|[^a-z])stage\s*(n?[1-4]|rem)"),
        (
            "task",
            r"count|arithmetic|calculat|reading|(^|[^a-z])read([^a-z]|$)|talk|speak|recit|"
            r"(^|[^a-z])task",
        ),
    )
)
#: The end of a marked run ("HV END", "photic off", "SZ END").
END_PATTERN = re.compile(
    r"(^|[^a-z])(end|ende|stop|off|over|finish(ed)?|done)([^a-z]|$)", re.IGNORECASE
)
#: The start of a marked run ("HV START", "photic on").
START_PATTERN = re.compile(r"(^|[^a-z])(start|begin|beginning|on)([^a-z]|$)", re.IGNORECASE)
#: Kinds whose markers end a state span.
BOUNDARY_KINDS = ("eyes open", "eyes closed", "awake", "asleep", "task") + PROCEDURES
#: The EEG effect of hyperventilation normally resolves within about a minute of its end
#: (common practice; from memory), so at least this much after an HV span is excluded as
#: post-hyperventilation, longer when post-HV markers say so.
POST_HV_MIN_S = 60.0
#: Alias -> canonical state (selection by "EC"/"EO" means eyes closed/open).
ALIASES = {
    "ec": "eyes closed",
    "eo": "eyes open",
    "eyes closed": "eyes closed",
    "eyes open": "eyes open",
}


@dataclass(frozen=True)
class Span:
    """A stretch of the recording, seconds from the first sample.

    Attributes
    ----------
    start, stop : float
        Seconds from the first sample; ``stop > start`` for spans this module returns.
    kind : str
        A state (``"eyes open"`` ...), a procedure (:data:`PROCEDURES`) or ``"range"``.
    label : str
        The annotation text that opened the span.
    """

    start: float
    stop: float
    kind: str
    label: str

    @property
    def duration(self) -> float:
        return self.stop - self.start


def classify(description: str) -> str:
    """Kind of an annotation: a state, a procedure, ``"task"`` or ``"comment"``.

    Parameters
    ----------
    description : str
        Annotation text; surrounding white space is ignored and case does not matter.

    Returns
    -------
    str
        The kind of the first pattern of :data:`PATTERNS` that matches: ``"eyes open"``,
        ``"eyes closed"``, ``"awake"``, ``"asleep"``, ``"task"``, one of :data:`PROCEDURES`, or
        ``"comment"`` (also when nothing matches).

    Examples
    --------
    >>> classify("HV 01:30"), classify("POST HV 00:30"), classify("PHOTO 12Hz")
    ('hyperventilation', 'post-hyperventilation', 'photic stimulation')
    >>> classify("Eyes Closed"), classify("EC"), classify("sleep spindles")
    ('eyes closed', 'eyes closed', 'comment')
    """
    text = str(description).strip()
    for kind, pat in PATTERNS:
        if pat.search(text):
            return kind
    return "comment"


def _sorted(annotations) -> list[tuple[float, float, str, str]]:
    out = [(float(o), float(d), str(t), classify(t)) for o, d, t in annotations]
    out.sort(key=lambda a: a[0])
    return out


def procedure_spans(annotations, end_s: float) -> list[Span]:
    """Spans of hyperventilation, post-hyperventilation, photic stimulation and seizures.

    A marker with a duration spans that duration.  Zero-duration markers of one kind form a
    run that starts at its first marker and ends at an explicit end marker of the same kind
    ("HV END", "SZ END") when one follows; otherwise at the next marker of another boundary kind
    after the run's last marker (or the end of the recording).  A post-hyperventilation span
    starts where the hyperventilation before it ends and lasts at least :data:`POST_HV_MIN_S`.

    Parameters
    ----------
    annotations : iterable of (onset_s, duration_s, description)
        Onset and duration in seconds from the first sample, any order.
    end_s : float
        Length of the recording, s.

    Returns
    -------
    list of Span
        Sorted by start; spans of one kind do not overlap (overlapping runs are merged).
    """
    ann = _sorted(annotations)
    spans: list[Span] = []
    for kind in PROCEDURES:
        i = 0
        while i < len(ann):
            onset, dur, text, k = ann[i]
            if k != kind or (dur == 0 and END_PATTERN.search(text)):
                i += 1  # not this kind, or an end marker without an open run
                continue
            if dur > 0:
                spans.append(Span(onset, min(onset + dur, end_s), kind, text))
                i += 1
                continue
            stop, last = end_s, i
            for j in range(i + 1, len(ann)):
                o, _, t, kj = ann[j]
                if kj == kind:
                    last = j
                    if END_PATTERN.search(t):
                        stop = o
                        break
                elif kj in BOUNDARY_KINDS and not _ended_later(ann, j, kind):
                    # another state or procedure ends the run, unless an explicit end marker of
                    # this run follows (then the marker lies inside the run: "eyes open" during HV)
                    stop = o
                    break
            spans.append(Span(onset, min(stop, end_s), kind, text))
            i = last + 1
    # post-hyperventilation begins where hyperventilation ends and lasts at least POST_HV_MIN_S
    hv = [s for s in spans if s.kind == "hyperventilation"]
    post = [s for s in spans if s.kind == "post-hyperventilation"]
    for h in hv:
        after = [
            p
            for p in post
            if p.start >= h.stop - 1e-9 and not any(h.stop < h2.start <= p.start for h2 in hv)
        ]
        if after:
            p = min(after, key=lambda s: s.start)
            post.remove(p)
            post.append(
                Span(h.stop, max(p.stop, min(h.stop + POST_HV_MIN_S, end_s)), p.kind, p.label)
            )
        else:
            post.append(
                Span(
                    h.stop,
                    min(h.stop + POST_HV_MIN_S, end_s),
                    "post-hyperventilation",
                    f"after {h.label}",
                )
            )
    spans = [s for s in spans if s.kind != "post-hyperventilation"] + post
    return _merge([s for s in spans if s.stop > s.start])


def _ended_later(ann, j: int, kind: str) -> bool:
    """True when an explicit end marker of ``kind`` follows index ``j`` before a new start."""
    for _, _, t, k in ann[j + 1 :]:
        if k == kind:
            if END_PATTERN.search(t):
                return True
            if START_PATTERN.search(t):
                return False
    return False


def _merge(spans: list[Span]) -> list[Span]:
    out: list[Span] = []
    for s in sorted(spans, key=lambda s: (s.kind, s.start)):
        if out and out[-1].kind == s.kind and s.start <= out[-1].stop:
            prev = out.pop()
            out.append(Span(prev.start, max(prev.stop, s.stop), prev.kind, prev.label))
        else:
            out.append(s)
    return sorted(out, key=lambda s: s.start)


def canonical_state(text: str) -> str | None:
    """The state a selection text names (``"EC"`` -> ``"eyes closed"``), else None.

    Parameters
    ----------
    text : str
        Selection text; case, runs of ``-``/``_`` and extra white space are ignored
        (``"Eyes_Closed"`` names eyes closed).

    Returns
    -------
    str or None
        ``"eyes closed"`` or ``"eyes open"`` for the spellings in :data:`ALIASES`, else None.
    """
    t = " ".join(re.sub(r"[-_]+", " ", str(text)).lower().split())
    return ALIASES.get(t)


def state_spans(annotations, wanted: str, end_s: float) -> list[Span]:
    """Spans selected by an annotation text, each ending at the next state-changing marker.

    Parameters
    ----------
    annotations : iterable of (onset_s, duration_s, description)
        Onset and duration in seconds from the first sample, any order.
    wanted : str
        An annotation description (matched case-insensitively and exactly), or ``"EC"``/``"EO"``
        and other spellings of eyes closed/open, which match every marker of that state
        (:func:`classify`).
    end_s : float
        Length of the recording, s; spans are clipped to ``[0, end_s]``.

    Returns
    -------
    list of Span
        Before procedure spans are removed (see :func:`subtract`).  A marker with a duration
        spans that duration; a zero-duration *state* marker spans until the next marker whose
        kind is in :data:`BOUNDARY_KINDS`; any other zero-duration marker until the next
        annotation.
    """
    ann = _sorted(annotations)
    want = str(wanted).strip().lower()
    state = canonical_state(wanted)
    out = []
    for i, (onset, dur, text, kind) in enumerate(ann):
        hit = text.strip().lower() == want or (state is not None and kind == state)
        if not hit:
            continue
        if dur > 0:
            stop = onset + dur
        elif kind in BOUNDARY_KINDS:
            later = [o for o, _, _, k in ann[i + 1 :] if k in BOUNDARY_KINDS and o > onset]
            stop = later[0] if later else end_s
        else:
            later = [o for o, _, _, _ in ann[i + 1 :] if o > onset]
            stop = later[0] if later else end_s
        out.append(Span(max(onset, 0.0), min(stop, end_s), kind, text))
    return out


def subtract(spans: list[Span], remove: list[Span]) -> tuple[list[Span], list[dict]]:
    """Remove ``remove`` spans from ``spans``.

    Parameters
    ----------
    spans : list of Span
        The selection, e.g. from :func:`state_spans`.
    remove : list of Span
        Spans to cut out, e.g. from :func:`procedure_spans`.

    Returns
    -------
    kept : list of Span
        What is left of ``spans``, sorted by start; a span cut in the middle becomes two with
        its kind and label.
    excluded : list of dict
        One entry per removed span that overlapped: ``kind``, ``label``, ``start_s``,
        ``stop_s`` and ``overlap_s`` (seconds of the selection it removed).
    """
    kept = list(spans)
    excluded = []
    for r in sorted(remove, key=lambda s: s.start):
        overlap = 0.0
        nxt = []
        for s in kept:
            a, b = max(s.start, r.start), min(s.stop, r.stop)
            if b <= a:
                nxt.append(s)
                continue
            overlap += b - a
            if s.start < a:
                nxt.append(Span(s.start, a, s.kind, s.label))
            if b < s.stop:
                nxt.append(Span(b, s.stop, s.kind, s.label))
        kept = nxt
        if overlap > 0:
            excluded.append(
                {
                    "kind": r.kind,
                    "label": r.label,
                    "start_s": round(r.start, 3),
                    "stop_s": round(r.stop, 3),
                    "overlap_s": round(overlap, 3),
                }
            )
    return sorted(kept, key=lambda s: s.start), excluded


__all__ = [
    "Span",
    "classify",
    "procedure_spans",
    "state_spans",
    "subtract",
    "canonical_state",
    "PROCEDURES",
    "PATTERNS",
    "BOUNDARY_KINDS",
    "POST_HV_MIN_S",
]
