"""The grey frames kept while tracking for the extension (``extend.py``), so the clip is not decoded twice.

The extension needs the frames around each flight: up to ``REACH`` exposures before its first point (its
start), those it spans, and up to ``REACH`` after its last (a lost end), plus background frames near them.
While tracking, which tracks will be flights is not yet known, so the frames kept are those near any
confirmed track: the latest ``REACH`` exposures always (a track may yet be confirmed there), every
exposure while a confirmed track is alive, and ``REACH`` exposures after. At most ``budget_bytes`` are
kept; past it the frames away from every track go first, then the oldest near one.
"""
from __future__ import annotations

import numpy as np

from .extend import REACH


class FrameHold:
    """Grey frames by exposure index, kept near confirmed tracks within a memory budget.

    >>> h = FrameHold(budget_bytes=8 * 10, frame_bytes=8, reach=2)
    >>> for i in range(12):
    ...     h.add(i, np.zeros(8, np.uint8), live=i in (5, 6))
    >>> sorted(h.frames())  # 3 and 4 before the live track, 5-6, then 7 and 8 after it, and the latest 2
    [3, 4, 5, 6, 7, 8, 10, 11]
    """

    def __init__(self, budget_bytes: int, frame_bytes: int, reach: int = REACH, block: int = 32):
        self.most = max(0, budget_bytes // max(1, frame_bytes))
        self.reach = reach
        self.near: dict[int, np.ndarray] = {}  # near a confirmed track (insertion order is exposure order)
        self.latest: dict[int, np.ndarray] = {}  # the latest exposures away from every track
        self.live_until = -1
        # frames are copied into blocks of slots allocated a block at a time and freed with the hold: many
        # frame-sized arrays kept and dropped one by one leave the allocator's heap fragmented, and in a
        # process that tracks clip after clip its memory grew to twice the budget
        self.block = max(1, min(block, self.most))
        self._blocks: list[np.ndarray] = []
        self._free: list[np.ndarray] = []

    def _copy(self, frame: np.ndarray) -> np.ndarray:
        if not self._free or self._free[-1].shape != frame.shape:
            b = np.empty((self.block, *frame.shape), frame.dtype)
            self._blocks.append(b)
            self._free.extend(b[j] for j in range(self.block - 1, -1, -1))
        slot = self._free.pop()
        slot[...] = frame
        return slot

    def add(self, i: int, frame: np.ndarray, live: bool) -> None:
        """Keep exposure ``i``'s frame; ``live``: a confirmed track is alive at it."""
        if not self.most:
            return
        if live:
            self.near.update(self.latest)  # the track's start may lie in the latest exposures
            self.latest.clear()
            self.live_until = i + self.reach
        if i <= self.live_until:
            self.near[i] = self._copy(frame)
        else:
            self.latest[i] = self._copy(frame)
            if len(self.latest) > self.reach:
                self._free.append(self.latest.pop(next(iter(self.latest))))
        while len(self.near) + len(self.latest) > self.most:
            drop = self.latest if self.latest else self.near
            self._free.append(drop.pop(next(iter(drop))))

    def frames(self) -> dict[int, np.ndarray]:
        return {**self.near, **self.latest}

    def clear(self) -> None:
        self.near.clear()
        self.latest.clear()
        self._free.clear()
        self._blocks.clear()
