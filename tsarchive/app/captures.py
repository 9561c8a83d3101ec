"""Captures of every screen at 80x24: ``python -m tsarchive.app.captures OUTDIR [--folder DIR]``.

Drives the app with Textual's Pilot, as a user would by keys, through Folder, Packing, Contents,
Strip, the three Shortlist rankings, Export and Keys, and writes each screen as plain text
(``NN-name.txt``) and SVG (``NN-name.svg``) into OUTDIR, plus ``index.txt`` listing them with
whether the footer was whole.  Without ``--folder`` it first packs the sample streams as
``tsarchive demo`` does (into ``OUTDIR/demo``, with the smallest recording copied beside them).
The folder must hold at least one archive (listed first) and one recording.  Used by the tests (every screen inside 80x24, footer not cut) and for the
issue's closing note.
"""

from __future__ import annotations

import argparse
import asyncio
import io
import sys
from dataclasses import dataclass
from pathlib import Path

from rich.console import Console
from textual.widgets import Footer

SIZE = (80, 24)


@dataclass(frozen=True)
class Capture:
    name: str          # the screen's name (and the Shortlist's ranking)
    text: str          # the screen as plain text, SIZE[1] lines of SIZE[0] columns at most
    svg: str
    footer_whole: bool  # the footer lies inside the terminal and shows every key it is meant to show
    missing_keys: tuple[str, ...] = ()


def _render(app) -> tuple[str, str]:
    """The current screen as (plain text, SVG), from the same full render (as App.export_screenshot makes it)."""
    width, height = app.size
    console = Console(width=width, height=height, file=io.StringIO(), force_terminal=True,
                      color_system="truecolor", record=True, legacy_windows=False, safe_box=False)
    console.print(app.screen._compositor.render_update(full=True, screen_stack=app._background_screens))
    text = console.export_text(clear=False, styles=False)
    return text, console.export_svg(title=f"tsarchive · {type(app.screen).__name__}")


def _footer_check(app, text: str) -> tuple[bool, tuple[str, ...]]:
    """Whether the footer sits inside the terminal and its last line names every shown key's description."""
    footer = app.screen.query(Footer)
    if not footer:
        return False, ("(no footer)",)
    r = footer.first().region
    inside = r.height > 0 and r.x >= 0 and r.y >= 0 and r.right <= app.size[0] and r.bottom <= app.size[1]
    lines = text.rstrip("\n").split("\n")
    last = lines[r.y] if inside and r.y < len(lines) else ""
    shown = [b.binding.description for b in app.screen.active_bindings.values()
             if b.binding.show and b.binding.description]
    missing = tuple(d for d in dict.fromkeys(shown) if d not in last)
    return inside and not missing, missing


async def _settle(app, pilot, rounds: int = 8) -> None:
    for _ in range(rounds):
        await pilot.pause()
        await app.workers.wait_for_complete()
    await pilot.pause(0.05)


#: (capture name, keys pressed from the previous screen, the screen class it must show)
STEPS = (("Folder", (), "FolderScreen"), ("Packing", ("to-recording", "p"), "PackingScreen"),
         ("Contents", ("escape", "to-archive", "enter"), "ContentsScreen"), ("Strip", ("s",), "StripScreen"),
         ("Shortlist unusual", ("u",), "ShortlistScreen"), ("Shortlist look-alikes", ("l",), "ShortlistScreen"),
         ("Shortlist largest errors", ("w",), "ShortlistScreen"), ("Export", ("escape", "e"), "ExportScreen"),
         ("Keys", ("escape", "f1"), "KeysScreen"))


def _keys(app, key: str) -> list[str]:
    """``to-recording`` / ``to-archive``: the arrow presses from the Folder table's cursor to the first such row."""
    if key not in ("to-recording", "to-archive"):
        return [key]
    from textual.widgets import DataTable
    table = app.screen.query_one(DataTable)
    kinds = [str(table.get_row_at(r)[1]) for r in range(table.row_count)]
    want = [r for r, kind in enumerate(kinds) if (kind == "archive") == (key == "to-archive")]
    if not want:
        return []
    step = want[0] - table.cursor_row
    return ["down" if step > 0 else "up"] * abs(step)


async def capture_all(folder: Path, size: tuple[int, int] = SIZE) -> list[Capture]:
    """Drive every screen of the app on ``folder`` (its first archive, then one recording) at ``size``.

    Raises RuntimeError when a step does not reach its screen (the folder lacks an archive or a recording).
    """
    from tsarchive.app.app import TsArchiveApp

    app = TsArchiveApp(folder)
    shots: list[Capture] = []
    async with app.run_test(size=size) as pilot:
        for name, keys, screen in STEPS:
            for key in keys:
                await pilot.press(*_keys(app, key))
                await _settle(app, pilot, rounds=3)
            await _settle(app, pilot)
            if type(app.screen).__name__ != screen:
                raise RuntimeError(f"{name}: the keys {' '.join(keys)} showed {type(app.screen).__name__}, "
                                   f"not {screen}; the folder needs an archive and a recording")
            text, svg = _render(app)
            whole, missing = _footer_check(app, text)
            shots.append(Capture(name, text, svg, whole, missing))
    return shots


def write_captures(shots: list[Capture], out: Path) -> list[Path]:
    out.mkdir(parents=True, exist_ok=True)
    written, index = [], []
    for i, shot in enumerate(shots, 1):
        stem = f"{i:02d}-{shot.name.lower().replace(' ', '-')}"
        (out / f"{stem}.txt").write_text(shot.text, encoding="utf-8")
        (out / f"{stem}.svg").write_text(shot.svg, encoding="utf-8")
        written += [out / f"{stem}.txt", out / f"{stem}.svg"]
        state = "footer whole" if shot.footer_whole else f"FOOTER CUT (missing: {', '.join(shot.missing_keys)})"
        index.append(f"{stem}: {shot.name}: {state}")
    (out / "index.txt").write_text("\n".join(index) + "\n", encoding="utf-8")
    return written


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(prog="python -m tsarchive.app.captures", description=__doc__.split("\n")[0])
    p.add_argument("out", type=Path, help="folder to write the captures to")
    p.add_argument("--folder", type=Path, help="folder with archives and recordings (default: pack the sample "
                   "streams as tsarchive demo does, into OUT/demo)")
    args = p.parse_args(argv)
    folder = args.folder
    if folder is None:
        import shutil

        from tsarchive.demo import find_samples, run_demo
        folder = args.out / "demo"
        run_demo(folder, echo=lambda *_: None)
        recordings = sorted(p for p in find_samples().iterdir() if p.suffix in (".csv", ".parquet", ".npy"))
        shutil.copy(min(recordings, key=lambda p: p.stat().st_size), folder)   # for the Packing screen
    try:
        shots = asyncio.run(capture_all(folder))
    except RuntimeError as exc:
        print(f"captures: {exc}", file=sys.stderr)
        return 2
    write_captures(shots, args.out)
    for line in (args.out / "index.txt").read_text(encoding="utf-8").splitlines():
        print(line)
    return 0 if all(s.footer_whole for s in shots) else 1


if __name__ == "__main__":
    sys.exit(main())
