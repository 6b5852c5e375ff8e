"""Load (issue 7): several people using the dashboard at once, and the server's memory afterwards.

It starts the dashboard (``streamlit run dashboard.py``) on a free loopback
port and drives it with one headless Chromium (Debian's /usr/bin/chromium,
through async Playwright) holding ``--sessions`` browser contexts (default 8),
each one person. Each runs ``--rounds`` rounds (default 2), all at the same
time; a round opens a demo sample through a shared link on the film-spectrum
page, then goes to the photo page, uploads a demo photo (the four demos in
turn), picks its sample (and the direction it thickens in, when known) and
computes the thickness map, until the mean thickness is shown.

Printed: rounds completed and failed (with the reason: a timeout, an
exception box or an error message on the page), the median and worst time
per round and for the map alone (button to result), and the resident memory
of the Streamlit process tree (psutil, sampled every 0.2 s in a thread):

* cold: the idle server before anyone connected;
* baseline: idle again after one warm-up person ran a round with each demo
  photo and left, and ``--after`` seconds passed (the imports and cached
  results that stay for good are in it);
* peak during the load;
* ``--after`` seconds (default 10) after every session closed; with ``--late``
  also once the server may drop the disconnected sessions (Streamlit's
  ``server.disconnectedSessionTTL``, 120 s by default, plus 15 s).

Goal: every round completes without an error, and memory ``--after`` seconds
after the load is back within 25 % or 200 MB of the baseline, whichever is
larger.

Run: ``python benchmarks/bench_load.py [--sessions 8] [--rounds 2] [--after 10] [--late]``
(needs /usr/bin/chromium: ``make test`` installs it when missing). Everything it
starts (the server, the browser) is stopped at the end, on an error or on Ctrl-C.
"""

from __future__ import annotations

import argparse
import asyncio
import json
import os
import re
import signal
import statistics
import sys
import tempfile
import threading
import time
import tomllib
from pathlib import Path

import psutil

sys.path.insert(0, str(Path(__file__).resolve().parent.parent / "tests"))
from dashboard_server import free_port, start_server, stop_server  # noqa: E402

ROOT = Path(__file__).resolve().parent.parent
PHOTOS = ROOT / "demo_data" / "photos"
CHROMIUM = "/usr/bin/chromium"
LAUNCH_ARGS = ["--no-sandbox", "--disable-gpu", "--disable-background-networking", "--disable-component-update",
               "--disable-sync", "--no-first-run"]
EXCEPTION = '[data-testid="stException"]'
ERROR = '[data-testid="stAlertContentError"]'
RUNNING = '[data-testid="stStatusWidget"]'
CONTENT = '[data-testid="stMain"] [data-testid="stElementContainer"]'
MB = 1024 * 1024


# --------------------------------------------------------------------------- the server and its memory

class MemorySampler(threading.Thread):
    """RSS of a process and all its descendants, every ``interval`` seconds."""

    def __init__(self, pid, interval=0.2):
        super().__init__(daemon=True)
        self.root, self.interval = psutil.Process(pid), interval
        self.samples = []  # (monotonic time, bytes)
        self._halt = threading.Event()

    def rss(self):
        total = 0
        try:
            procs = [self.root] + self.root.children(recursive=True)
        except psutil.Error:
            return 0
        for p in procs:
            try:
                total += p.memory_info().rss
            except psutil.Error:
                pass
        return total

    def run(self):
        while not self._halt.is_set():
            self.samples.append((time.monotonic(), self.rss()))
            self._halt.wait(self.interval)

    def stop(self):
        self._halt.set()
        self.join(timeout=5)

    def peak(self, start, end):
        return max((b for t, b in self.samples if start <= t <= end), default=0)

    def now(self, seconds=1.0):
        """Median of the last ``seconds`` of samples (steadier than one sample)."""
        end = time.monotonic()
        values = [b for t, b in self.samples if t >= end - seconds] or [self.rss()]
        return statistics.median(values)


# --------------------------------------------------------------------------- one person at the dashboard

class RoundFailed(Exception):
    pass


async def settle(page, timeout_s, quiet_s=0.75):
    """Wait until the page shows content and its script has not been running for ``quiet_s``."""
    deadline = time.monotonic() + timeout_s
    quiet_since = None
    while True:
        if time.monotonic() > deadline:
            raise RoundFailed(f"{page.url}: still running after {timeout_s:.0f} s")
        if not await page.locator(CONTENT).count() or await page.locator(RUNNING).count():
            quiet_since = None
        elif quiet_since is None:
            quiet_since = time.monotonic()
        elif time.monotonic() - quiet_since >= quiet_s:
            break
        await asyncio.sleep(0.1)
    if await page.locator(EXCEPTION).count():
        raise RoundFailed(f"{page.url}: exception box: {(await page.locator(EXCEPTION).first.inner_text())[:300]}")
    if await page.locator(ERROR).count():
        raise RoundFailed(f"{page.url}: error message: {(await page.locator(ERROR).first.inner_text())[:300]}")


async def choose(page, label, option, timeout_s):
    """Pick ``option`` in a selectbox by typing it and pressing Enter, as a keyboard user would.

    (Clicking the option in the list failed now and then: a box low in the sidebar opens its list
    below the window's edge, where the click waits out its timeout.)"""
    box = page.get_by_role("combobox", name=label)
    await box.scroll_into_view_if_needed()
    await box.click()
    await box.fill(option)
    await page.get_by_role("option", name=option, exact=True).wait_for(timeout=10_000)
    await box.press("Enter")
    await settle(page, timeout_s)
    if await box.input_value() != option:
        raise RoundFailed(f"{label!r} shows {await box.input_value()!r}, not {option!r}")


def demo_photos():
    """(photo path, demo sample's URL word, its display name, its trend or None) for each demo photo."""
    out = []
    for meta in sorted(PHOTOS.glob("*.json")):
        known = json.loads(meta.read_text(encoding="utf-8"))
        stack = ROOT / "demo_data" / known["stack"]
        name = tomllib.loads(stack.read_text(encoding="utf-8"))["name"]
        out.append((PHOTOS / known["photo"], stack.stem, name, known.get("trend")))
    return out


async def one_round(context, base, photo, timeout_s):
    """Open a demo through a link, upload a photo and map it. Returns (round seconds, map seconds)."""
    path, sample, name, trend = photo
    t0 = time.monotonic()
    page = await context.new_page()
    page.set_default_timeout(timeout_s * 1000)
    try:
        await page.goto(f"{base}/film-spectrum?sample={sample}&thickness_nm=300", wait_until="commit")
        await settle(page, timeout_s)
        await page.goto(f"{base}/photo-map", wait_until="commit")
        await settle(page, timeout_s)
        await page.get_by_text("my photo", exact=True).click()
        await settle(page, timeout_s)
        await page.locator('[data-testid="stMain"] [data-testid="stFileUploader"] input[type="file"]'
                           ).set_input_files(path)
        await settle(page, timeout_s)
        await choose(page, "Sample", name, timeout_s)
        if trend:
            await choose(page, "Film gets thicker towards", trend, timeout_s)
        t_map = time.monotonic()
        await page.get_by_role("button", name="Compute the thickness map").click()
        mean = page.locator('[data-testid="stMetric"]').filter(has_text="mean thickness")
        await mean.wait_for(timeout=timeout_s * 1000)
        map_s = time.monotonic() - t_map
        await settle(page, timeout_s)
        if not re.search(r"\d", await mean.inner_text()):
            raise RoundFailed("no mean thickness shown")
        return time.monotonic() - t0, map_s
    except RoundFailed:
        raise
    except Exception as exc:  # noqa: BLE001 - a Playwright timeout or a closed page: one failed round
        shot = ROOT / "test-artifacts" / f"bench_load-failed-{id(page)}.png"
        try:  # what the page showed, for a person to look at
            shot.parent.mkdir(parents=True, exist_ok=True)
            await page.screenshot(path=str(shot))
        except Exception:  # noqa: BLE001 - the page may be gone
            shot = None
        raise RoundFailed(f"{type(exc).__name__}: {str(exc).splitlines()[0][:300]}"
                          + (f" (page: {page.url}; screenshot {shot.relative_to(ROOT)})" if shot else "")) from exc
    finally:
        await page.close()


async def person(browser, base, index, rounds, photos, timeout_s, results):
    context = await browser.new_context(viewport={"width": 1280, "height": 800})
    try:
        for r in range(rounds):
            photo = photos[(index + r) % len(photos)]
            try:
                results.append(("ok", index, r, *await one_round(context, base, photo, timeout_s)))
            except RoundFailed as exc:
                results.append(("error", index, r, str(exc)))
    finally:
        await context.close()


async def drive(base, sampler, args):
    from playwright.async_api import async_playwright

    loop, task = asyncio.get_running_loop(), asyncio.current_task()
    for sig in (signal.SIGINT, signal.SIGTERM):  # Ctrl-C or a kill: cancel, so every finally closes its part
        loop.add_signal_handler(sig, task.cancel)
    photos = demo_photos()
    figures = {}
    async with async_playwright() as pw:
        browser = await pw.chromium.launch(executable_path=CHROMIUM, args=LAUNCH_ARGS, timeout=60_000)
        try:
            figures["cold"] = sampler.now()
            print(f"server idle, before anyone connected: {figures['cold'] / MB:.0f} MB", flush=True)
            warm = []  # one round per demo photo, so that every demo's cached results are in the baseline
            await person(browser, base, 0, len(photos), photos, args.timeout, warm)
            failed = [w for w in warm if w[0] != "ok"]
            if failed:
                raise RuntimeError(f"a warm-up round failed: {failed[0][3]}")
            await asyncio.sleep(args.after)
            figures["baseline"] = sampler.now()
            print(f"after {len(warm)} warm-up rounds, one per demo photo ({sum(w[3] for w in warm):.1f} s), and "
                  f"{args.after:g} s idle: {figures['baseline'] / MB:.0f} MB", flush=True)

            results = []
            start = time.monotonic()
            await asyncio.gather(*(person(browser, base, i, args.rounds, photos, args.timeout, results)
                                   for i in range(args.sessions)))
            end = time.monotonic()
            figures.update(results=results, wall=end - start, peak=sampler.peak(start, end))
        finally:
            await browser.close()
    await asyncio.sleep(args.after)
    figures["after"] = sampler.now()
    if args.late:
        wait = max(0.0, args.session_ttl + 15 - args.after)
        print(f"waiting {wait:.0f} s more for the server to drop the disconnected sessions…", flush=True)
        await asyncio.sleep(wait)
        figures["late"] = sampler.now()
    return figures


def report(figures, args):
    results = figures["results"]
    ok = [r for r in results if r[0] == "ok"]
    errors = [r for r in results if r[0] == "error"]
    total = args.sessions * args.rounds
    print()
    print(f"rounds completed     {len(ok)} / {total}, errors {len(errors)} "
          f"(wall time of the load {figures['wall']:.1f} s)")
    for _, i, r, why in errors:
        print(f"  session {i} round {r}: {why}")
    if ok:
        rounds = [r[3] for r in ok]
        maps = [r[4] for r in ok]
        print(f"time per round       median {statistics.median(rounds):.1f} s, worst {max(rounds):.1f} s")
        print(f"  of which the map   median {statistics.median(maps):.1f} s, worst {max(maps):.1f} s "
              "(button to result)")
    cold, base, peak, after = figures["cold"], figures["baseline"], figures["peak"], figures["after"]
    print(f"server memory (RSS)  cold {cold / MB:.0f} MB; baseline {base / MB:.0f} MB; peak during the load "
          f"{peak / MB:.0f} MB; {args.after:g} s after the sessions closed {after / MB:.0f} MB "
          f"({(after - base) / MB:+.0f} MB)")
    if "late" in figures:
        print(f"  {args.session_ttl + 15:.0f} s after (disconnected sessions may be gone): "
              f"{figures['late'] / MB:.0f} MB ({(figures['late'] - base) / MB:+.0f} MB)")
    allowed = max(0.25 * base, 200 * MB)
    print(f"goal: all {total} rounds complete without error: {'met' if len(ok) == total else 'NOT met'}; "
          f"memory {args.after:g} s after the load within max(25 %, 200 MB) = {allowed / MB:.0f} MB of the "
          f"baseline: {'met' if after - base <= allowed else 'NOT met'}")


def _interrupt(signum, frame):
    raise KeyboardInterrupt


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sessions", type=int, default=8, help="people at the dashboard at once (default 8)")
    parser.add_argument("--rounds", type=int, default=2, help="rounds each (default 2)")
    parser.add_argument("--after", type=float, default=10.0,
                        help="seconds to wait before reading memory after the load (default 10)")
    parser.add_argument("--late", action="store_true",
                        help="also read memory once disconnected sessions may be dropped (TTL + 15 s)")
    parser.add_argument("--session-ttl", type=float, default=120.0,
                        help="the server's server.disconnectedSessionTTL, s (default: Streamlit's 120)")
    parser.add_argument("--timeout", type=float, default=240.0,
                        help="longest wait for one step of a round, s (default 240)")
    args = parser.parse_args()
    if args.sessions < 1 or args.rounds < 1:
        parser.error("--sessions and --rounds must be at least 1")
    if not os.access(CHROMIUM, os.X_OK):
        sys.exit(f"bench_load: {CHROMIUM} is missing (apt-get install chromium; `make test` does it when root)")

    log_path = ROOT / "test-artifacts" / "bench_load-server.log"
    log_path.parent.mkdir(parents=True, exist_ok=True)
    port = free_port()
    proc = sampler = None
    data_dir = tempfile.TemporaryDirectory(prefix="bench_load-")
    signal.signal(signal.SIGTERM, _interrupt)  # a polite kill ends up in the finally below, as Ctrl-C does
    try:
        proc = start_server(port, log_path, data_dir.name)
        sampler = MemorySampler(proc.pid)
        sampler.start()
        time.sleep(2.0)
        print(f"filmcalc load benchmark: {args.sessions} sessions × {args.rounds} rounds, one Chromium, "
              f"dashboard on http://127.0.0.1:{port} (pid {proc.pid}, log {log_path.relative_to(ROOT)})",
              flush=True)
        figures = asyncio.run(drive(f"http://127.0.0.1:{port}", sampler, args))
        signal.signal(signal.SIGTERM, _interrupt)  # asyncio reset it when its loop closed
        report(figures, args)
    except (KeyboardInterrupt, asyncio.CancelledError):
        print("\ninterrupted: stopping the browser and the server", file=sys.stderr)
        sys.exit(130)
    finally:
        if sampler is not None:
            sampler.stop()
        stop_server(proc)
        data_dir.cleanup()


if __name__ == "__main__":
    main()
