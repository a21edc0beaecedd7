"""The report: every output file of ``envelope check``, written from a ``CheckResult``.

``write_report(result, out_dir, now=None)`` writes, atomically (see ``files``), into ``out_dir``:

- ``clearance.csv``: one row per target x branch (``tables.CSV_COLUMNS``);
- ``clearance.json``: everything (tool version, cell summary, pair definitions, every row with its
  per-pair arrays, motions);
- ``report.html``: one self-contained page: verdict, cautions, inputs, cell, warnings, pictures, the
  worst rows;
- ``report.pdf``: the same as a document;
- ``worst-<k>-<target>.glb``: 3-D scenes of the worst row of each of the (up to) ``GLB_TARGETS`` worst
  targets;
- ``motion-<k>-<program>-<move>.glb``: 3-D scenes of the worst configuration of each of the (up to)
  ``motions.MOTION_GLB`` worst moves.

clearance.csv and clearance.json hold the motion rows too (see ``motions``); the HTML and PDF have a
Motions section. Every file is documented in docs/outputs.md. Only the HTML and PDF carry a date (``now``).
"""

from __future__ import annotations

import datetime as _dt
import re
from pathlib import Path

from .files import write_bytes_atomic, write_text_atomic

GLB_TARGETS = 5
"""Scenes are written for the worst row of at most this many targets (the worst)."""
GLB_PATTERN = re.compile(r"^worst-\d+-[A-Za-z0-9_.-]*\.glb$")
"""Names of the scene files; older ones in ``out_dir`` that a new run does not write are removed."""
MOTION_GLB_PATTERN = re.compile(r"^motion-\d+-[A-Za-z0-9_.-]*\.glb$")
"""Names of the motion scene files (``motion-<k>-<program>-<move>.glb``), removed like ``GLB_PATTERN``."""


def _slug(name: str) -> str:
    s = re.sub(r"[^A-Za-z0-9_.-]+", "_", name).strip("._")
    return s[:60] or "target"


def now_text(now=None) -> str:
    """The report date as ``YYYY-MM-DD HH:MM:SS UTC`` (``now``, or the current time if None)."""
    if now is None:
        now = _dt.datetime.now(_dt.timezone.utc)
    if now.tzinfo is not None:
        now = now.astimezone(_dt.timezone.utc)
    return now.strftime("%Y-%m-%d %H:%M:%S UTC")


def glb_rows(result, limit: int = GLB_TARGETS) -> list:
    """Row indices that get a scene: the worst drawable row of each of the ``limit`` worst targets."""
    from .figures import drawn_rows

    return drawn_rows(result, limit)


def motion_glb_names(result) -> dict:
    """``{file name: index into result.motions}``: a scene ``motion-<k>-<program>-<move>.glb`` of the
    worst configuration of each of the (up to) ``motions.MOTION_GLB`` worst moves, k = 1 the worst."""
    from .motions import drawn_motions

    out = {}
    for k, i in enumerate(drawn_motions(result), start=1):
        m = result.motions[i]
        out[f"motion-{k}-{_slug(m.program)}-{int(m.move)}.glb"] = i
    return out


def _json_child(result, path) -> None:  # runs in a forked process
    from .tables import write_json

    write_json(result, path)


def _start_json(result, path, jobs: int):
    """A forked process writing clearance.json (it shares the result's memory, nothing is pickled),
    or None to write it here (one job, or no ``fork`` on this platform)."""
    import multiprocessing as mp

    if jobs <= 1 or "fork" not in mp.get_all_start_methods():
        return None
    proc = mp.get_context("fork").Process(target=_json_child, args=(result, path), daemon=True)
    proc.start()
    return proc


def write_report(result, out_dir, *, now=None, jobs: int = 1) -> dict:
    """Write every report file of ``result`` into ``out_dir`` (created if missing).

    Parameters
    ----------
    result : CheckResult
    out_dir : str or Path
    now : datetime, optional
        The report date printed in the HTML and PDF (UTC); the current time if None.
    jobs : int
        With 2 or more, clearance.json (the largest file) is written by a second process while this
        one writes the others; the files are the same either way. Should that process fail, the
        file is written here.

    Returns
    -------
    dict of str -> Path
        File name -> path of every file written: ``clearance.csv``, ``clearance.json``,
        ``report.html``, ``report.pdf``, each ``worst-<k>-<target>.glb`` and each
        ``motion-<k>-<program>-<move>.glb``.
    """
    from ..scene import glb_bytes, motion_scene, row_scene
    from .figures import report_figures
    from .html import html_text
    from .pdf import pdf_bytes
    from .tables import write_csv, write_json

    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    files = {}
    json_proc = _start_json(result, out / "clearance.json", jobs)
    files["clearance.csv"] = write_csv(result, out / "clearance.csv")
    if json_proc is None:
        files["clearance.json"] = write_json(result, out / "clearance.json")
    stamp = now_text(now)
    figures = report_figures(result)
    files["report.html"] = write_text_atomic(out / "report.html", html_text(result, figures, stamp))
    files["report.pdf"] = write_bytes_atomic(out / "report.pdf", pdf_bytes(result, figures, stamp))
    for k, i in enumerate(glb_rows(result), start=1):
        row = result.rows[i]
        name = f"worst-{k}-{_slug(row.target)}.glb"
        files[name] = write_bytes_atomic(out / name, glb_bytes(row_scene(result.cell, row)))
    for name, i in motion_glb_names(result).items():
        files[name] = write_bytes_atomic(out / name, glb_bytes(motion_scene(result.cell, result.motions[i])))
    if json_proc is not None:
        json_proc.join()
        if json_proc.exitcode != 0:  # the child failed (it printed why): write the file here
            write_json(result, out / "clearance.json")
        files["clearance.json"] = out / "clearance.json"
    for old in out.iterdir():
        if (GLB_PATTERN.match(old.name) or MOTION_GLB_PATTERN.match(old.name)) and old.name not in files:
            old.unlink()
    return files


__all__ = ["write_report", "GLB_TARGETS", "now_text", "glb_rows", "motion_glb_names"]
