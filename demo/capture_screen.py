"""Capture one screen of the review app on the demo queue as plain text (docs/screen-capture.txt).

The capture is made, not drawn: the script builds the demo queue in a temporary folder
(:func:`tracevet.demo.build_demo_queue`), runs ``tracevet review`` on it in a detached tmux session of
the given size (a tmux server of its own, ``-L tracevet-capture``), opens one record from the worklist
with the arrow keys and ``enter``, waits until the screen stops changing (the background suggestion
finished), and saves ``tmux capture-pane -p``: the characters on the screen, without colours or escape
sequences. Without tmux (or with ``--headless``) the app runs under Textual's test pilot
(``App.run_test``) and the screen is rendered to text the way the app tests read it.

Usage, from the repository root::

    .venv/bin/python demo/capture_screen.py                    # 120x36, dive06-diver-gunn
    .venv/bin/python demo/capture_screen.py --record dive05-diver-frode --size 100x30 --out /tmp/s.txt

The first line of the output file says how it was made; the rest is the screen, one line per row,
trailing blanks removed.
"""

from __future__ import annotations

import argparse
import asyncio
import shlex
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
DEFAULT_RECORD = "dive06-diver-gunn"  # baseline cut-off typed as 5 Hz: fail flags (demo/README.md)
REVIEWER = "demo"
SOCKET = "tracevet-capture"
SETTLE_S = 1.5  # the screen must stay the same this long
TIMEOUT_S = 180.0


def _screen_ready(text: str, record_id: str) -> bool:
    """The record screen of ``record_id`` is up and the background suggestion is no longer computing."""
    lines = text.splitlines()
    return bool(lines) and record_id in lines[0] and "suggestion computing" not in text


def _tmux(*args: str) -> str:
    return subprocess.run(
        ["tmux", "-L", SOCKET, "-f", "/dev/null", *args], check=True, capture_output=True, text=True
    ).stdout


def _settled(read, ready, timeout: float = TIMEOUT_S) -> str:
    """Poll ``read()`` until ``ready(text)`` holds and the text has not changed for SETTLE_S seconds."""
    started = time.monotonic()
    last, since = None, time.monotonic()
    while time.monotonic() - started < timeout:
        text = read()
        if text != last:
            last, since = text, time.monotonic()
        elif ready(text) and time.monotonic() - since >= SETTLE_S:
            return text
        time.sleep(0.25)
    raise SystemExit(f"capture_screen: the screen did not settle within {timeout:.0f} s")


def capture_tmux(queue: Path, record_id: str, width: int, height: int) -> str:
    """Run the app in a detached tmux session, open ``record_id``, return the settled screen text."""
    command = [sys.executable, "-m", "tracevet", "review", str(queue), "--reviewer", REVIEWER]
    _tmux("new-session", "-d", "-s", "capture", "-x", str(width), "-y", str(height), shlex.join(command))
    try:

        def read() -> str:
            return _tmux("capture-pane", "-p", "-t", "capture")

        worklist = _settled(read, lambda text: " record " in text and record_id in text)
        rows = worklist.splitlines()
        header = next(i for i, line in enumerate(rows) if line.split()[:2] == ["record", "state"])
        position = next(i for i, line in enumerate(rows[header + 1 :]) if line.split()[:1] == [record_id])
        _tmux("send-keys", "-t", "capture", *(["Down"] * position), "Enter")
        text = _settled(read, lambda text: _screen_ready(text, record_id))
        _tmux("send-keys", "-t", "capture", "C-q")
        return text
    finally:
        subprocess.run(["tmux", "-L", SOCKET, "kill-server"], capture_output=True)


def capture_headless(queue: Path, record_id: str, width: int, height: int) -> str:
    """Run the app under Textual's test pilot, open ``record_id``, return the settled screen text."""
    from tracevet.app.app import ReviewApp
    from tracevet.workqueue import Queue

    def screen_text(app) -> str:
        # As the app tests read the screen: the compositor's rows, their characters only.
        strips = app.screen._compositor.render_strips()
        return "\n".join("".join(segment.text for segment in strip) for strip in strips)

    async def run() -> str:
        app = ReviewApp(Queue.open(queue), REVIEWER, colour=False)
        async with app.run_test(size=(width, height)) as pilot:
            await pilot.pause(0.5)
            app.open_record(record_id)
            started = time.monotonic()
            last, since = None, time.monotonic()
            while time.monotonic() - started < TIMEOUT_S:
                await pilot.pause(0.25)
                text = screen_text(app)
                if text != last:
                    last, since = text, time.monotonic()
                elif _screen_ready(text, record_id) and time.monotonic() - since >= SETTLE_S:
                    await pilot.press("ctrl+q")
                    return text
            raise SystemExit(f"capture_screen: the screen did not settle within {TIMEOUT_S:.0f} s")

    return asyncio.run(run())


def main(argv: list[str] | None = None) -> int:
    """Build the demo queue, capture the record screen, write it with a header line."""
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--record", default=DEFAULT_RECORD, help=f"demo record to open (default {DEFAULT_RECORD})")
    parser.add_argument("--size", default="120x36", help="terminal COLUMNSxROWS (default 120x36)")
    parser.add_argument("--out", default=str(REPO / "docs" / "screen-capture.txt"), help="file to write")
    parser.add_argument("--headless", action="store_true", help="use Textual's test pilot even when tmux exists")
    args = parser.parse_args(argv)
    width, height = (int(part) for part in args.size.lower().split("x"))
    from tracevet.demo import build_demo_queue

    use_tmux = not args.headless and shutil.which("tmux") is not None
    with tempfile.TemporaryDirectory(prefix="tracevet-capture-") as folder:
        queue = Path(folder) / "dive-queue"
        build_demo_queue(queue)
        capture = capture_tmux if use_tmux else capture_headless
        text = capture(queue, args.record, width, height)
    how = "tmux capture-pane -p" if use_tmux else "Textual App.run_test, screen rendered to text"
    header = (
        f"# Made by demo/capture_screen.py --record {args.record} --size {width}x{height} "
        f"({how}; tracevet review on the demo queue, reviewer '{REVIEWER}'), not drawn by hand."
    )
    lines = [line.rstrip() for line in text.splitlines()]
    Path(args.out).write_text(header + "\n" + "\n".join(lines) + "\n", encoding="utf-8")
    print(f"wrote {args.out} ({len(lines)} rows, {how})")
    return 0


if __name__ == "__main__":
    sys.exit(main())
