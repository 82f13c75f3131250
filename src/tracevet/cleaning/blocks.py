"""Overlapping blocks, so that long records are cleaned in bounded memory."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np

DEFAULT_BLOCK_SAMPLES = 1 << 21


@dataclass(frozen=True)
class Block:
    """One block: the segment read ``[start, stop)`` and the core it writes ``[core_start, core_stop)``."""

    start: int
    stop: int
    core_start: int
    core_stop: int

    @property
    def core_offset(self) -> int:
        """Where the core begins inside the segment."""
        return self.core_start - self.start


def plan_blocks(n: int, core: int, overlap: int, align: int = 1) -> list[Block]:
    """Cover ``[0, n)`` with cores of ``core`` samples, each read with ``overlap`` either side.

    ``core`` and ``overlap`` are rounded up to multiples of ``align`` so that
    every segment starts on the same dyadic grid as the whole record (the
    decimated transform is not shift-invariant). One block when ``n`` fits.
    """
    align = max(1, int(align))
    core = max(align, -(-int(core) // align) * align)
    overlap = -(-int(overlap) // align) * align
    if n <= core + 2 * overlap:
        return [Block(0, n, 0, n)]
    blocks = []
    for s in range(0, n, core):
        e = min(n, s + core)
        blocks.append(Block(max(0, s - overlap), min(n, e + overlap), s, e))
    return blocks


def process_inplace(
    buf: np.ndarray,
    blocks: list[Block],
    func: Callable[[np.ndarray, Block], np.ndarray],
    after_block: Callable[[int], None] | None = None,
) -> None:
    """Replace ``buf`` block by block with ``func(segment, block)``'s core.

    ``func`` gets a copy of the segment (the buffer itself when there is
    one block; it must not modify it in place) and returns an array of the same
    length. A block's result is written only after the next segment has been
    read, so every block sees the unprocessed input in its overlap.
    """
    if len(blocks) == 1:  # whole record: no copy needed
        result = func(buf, blocks[0])
        buf[:] = result
        if after_block is not None:
            after_block(0)
        return
    pending: tuple[int, int, np.ndarray] | None = None
    for i, block in enumerate(blocks):
        segment = buf[block.start : block.stop].copy()
        if pending is not None:
            buf[pending[0] : pending[1]] = pending[2]
        result = func(segment, block)
        pending = (
            block.core_start,
            block.core_stop,
            result[block.core_offset : block.core_offset + block.core_stop - block.core_start],
        )
        del segment, result
        if after_block is not None:
            after_block(i)
    if pending is not None:
        buf[pending[0] : pending[1]] = pending[2]
