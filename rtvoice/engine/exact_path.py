"""The exact per-voice path: voices changed inside a block, rendered with each change on its sample.

The performer's changes of a block arrive in time order. Each changed voice is put on
the exact path (:class:`~rtvoice.engine.bookkeeping.SlotMarks`), rendered up to its next
change, changed, and so on, all changed voices at once per round, so a chord costs a few
array operations rather than a few per note. What a change does to the output filter
(its steady state moves) goes in as the filter's free response from that sample on.
"""

from __future__ import annotations

import numpy as np

from rtvoice.engine.changes import ChangeKind, VoiceChange
from rtvoice.engine.midi import ChannelState
from rtvoice.engine.note_tables import DECAY_HOLD, DECAY_RELEASE, faded
from rtvoice.engine.voice_renderer import VoiceRenderer
from rtvoice.physics.damping import LN_1000, release_rate_per_s

FADE_T60_S = 0.02  # steal, re-pluck and all-sound-off fade


def _fresh_start(change: VoiceChange) -> bool:
    return change.start is not None and change.start.fresh


def apply_changes(voices: VoiceRenderer, changes: list[VoiceChange], channels: ChannelState, ramping: bool) -> None:
    """Render each changed voice up to its next change, apply the changes, repeat; then render the
    voices changed after sample 0 to the end of the block on the exact path. Empties ``changes``.

    A voice's changes on the same sample (a note-off and the re-pluck's fade, say)
    are one step: its tables, steady state and the output filter's kick are worked
    out once, for where the last of them leaves it.
    """
    marks = voices.marks
    if changes:
        queues: dict[int, list[list[VoiceChange]]] = {}
        for change in changes:
            # A new voice is rendered from its note-on's sample; a voice that sounded, from the block's start.
            marks.touch(change.slot, change.at if _fresh_start(change) else None)
            steps = queues.setdefault(change.slot, [])
            if steps and steps[-1][0].at == change.at:
                steps[-1].append(change)
            else:
                steps.append([change])
        changes.clear()
        depth = max(len(q) for q in queues.values())
        for step in range(depth):
            now = [q[step] for q in queues.values() if len(q) > step]
            _render_segments(voices, [g[0].slot for g in now], [g[0].at for g in now], ramping)
            idx = np.array([g[0].slot for g in now])
            # A fresh slot starts from silence: its steady state before is zero.
            stale = [i for i, g in enumerate(now) if not _fresh_start(g[0])]
            before = np.zeros((len(now), voices.filter.order))
            if stale:
                before[stale] = voices.steady_states(idx[stale])
            # A start sets the voice up anew: what came before it on its sample no longer matters.
            now = [g[max((i for i, c in enumerate(g) if c.kind is ChangeKind.START), default=0):] for g in now]
            starts = [g[0] for g in now if g[0].kind is ChangeKind.START]
            if starts:
                voices.start_voices(starts, channels)
            pool = voices.pool
            for group in now:
                v = group[0].slot
                for change in group:
                    if change.kind is ChangeKind.RELEASE:
                        pool.sigma[v] = release_rate_per_s(pool.sigma_hold[v], voices.release_t60_s)
                        pool.decay[v] = DECAY_RELEASE
                    elif change.kind is ChangeKind.FADE:
                        np.maximum(pool.sigma[v], LN_1000 / FADE_T60_S, out=pool.sigma[v])
                        pool.decay[v] = faded(pool.decay[v])
                    else:
                        pool.decay[v] = DECAY_HOLD
                        pool.epoch[v] = voices.tables.epoch
                marks.mark_tables(v)
            # A release or fade changes decay rates only: its slot's heard modes stay as they are.
            voices.flush_tables(same_modes={g[0].slot for g in now if g[0].kind is not ChangeKind.START})
            # The output filter's free response to each change, from where its voice stands (with
            # events in time order, the change's own sample).
            at = np.maximum([g[0].at for g in now], marks.upto[idx])
            voices.filter.kicks(before - voices.steady_states(idx), at, voices.exact)
            voices.exact_used = True
    # A voice changed only at sample 0 is as good as untouched: the block product renders it.
    marks.untouch_unmoved()
    touched = marks.touched_list
    if touched:
        _render_segments(voices, touched, [voices.block] * len(touched), ramping)


def _render_segments(voices: VoiceRenderer, slots: list[int], stops: list[int], ramping: bool) -> None:
    """Render each of ``slots`` on the exact path from where it stands up to its sample in ``stops``."""
    pool = voices.pool
    upto = voices.marks.upto
    # The few slots with samples left to render, picked in Python (changes on the block's first
    # sample have none, and then no array is made at all).
    todo = [(v, stop) for v, stop in zip(slots, stops, strict=True) if stop > upto[v]]
    if not todo:
        return
    idx = np.array([v for v, _ in todo])
    stop = np.array([t for _, t in todo])
    start = upto[idx]
    count = stop - start
    s = pool.s[idx]
    y = pool.segments(idx, pool.gf[idx] * s, int(count.max()))
    if ramping:
        y_next = pool.segments(idx, voices.gf_next[idx] * s, int(count.max()))
        y_next -= y
        y_next *= voices.ramp_ext[start[:, None] + voices.sample_index[: y.shape[1]]]
        y += y_next
    exact = voices.exact
    for i in range(idx.size):
        exact[start[i]:stop[i]] += y[i, : count[i]]
    voices.exact_used = True
    pool.s[idx] = s * np.exp(pool.logp[idx] * count[:, None])  # double precision: nothing drifts
    upto[idx] = stop
