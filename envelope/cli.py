"""The ``envelope`` command: a thin layer over library calls.

Exit codes (every command): 0 clear, 1 a finding, 2 bad input, 3 an internal error. Every error is
one readable line on stderr naming the file, the item and what is wrong.
"""

from __future__ import annotations

import functools
import json
import sys
from pathlib import Path

import click

from . import __version__
from .errors import EXIT_BAD_INPUT, EXIT_CLEAR, EXIT_FINDING, EXIT_INTERNAL, EnvelopeError, InputError

CAUTION_HELP = (
    "CAUTION: a design aid for pre-checking zones and clearances. It does not replace the risk "
    "assessment by a competent person, validation of the safety functions, the arm maker's stopping "
    "data, or the applicable law and codes, which take precedence. Results are only as good as the "
    "meshes and parameters given; clearances exclude stopping distance unless it is entered."
)


def _fail(message: str, code: int) -> None:
    click.echo(f"envelope: error: {message}", err=True)
    sys.exit(code)


def _guarded(func):
    """Map envelope's errors to one line on stderr and an exit code; never a traceback for bad input."""

    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        try:
            return func(*args, **kwargs)
        except InputError as exc:
            _fail(str(exc), EXIT_BAD_INPUT)
        except EnvelopeError as exc:
            _fail(str(exc), exc.exit_code)
        except OSError as exc:
            where = f"{exc.filename}: " if getattr(exc, "filename", None) else ""
            _fail(f"{where}{exc.strerror or exc}", EXIT_BAD_INPUT)
        except KeyboardInterrupt:
            _fail("interrupted; no output file was left half-written", EXIT_INTERNAL)
        except Exception as exc:  # a bug in envelope: still one line, with a way to see more
            if "--debug" in sys.argv or _debug_env():
                raise
            _fail(
                f"internal error ({type(exc).__name__}: {exc}); set ENVELOPE_DEBUG=1 for a traceback "
                "and please report it",
                EXIT_INTERNAL,
            )

    return wrapper


def _debug_env() -> bool:
    import os

    return os.environ.get("ENVELOPE_DEBUG", "") not in ("", "0")


class _Progress:
    """A progress bar on stderr, silent when stderr is not a terminal."""

    def __init__(self, label: str):
        self.label = label
        self.bar = None
        self.enabled = sys.stderr.isatty()

    def __call__(self, done: int, total: int) -> None:
        if not self.enabled or total <= 0:
            return
        if self.bar is None:
            self.bar = click.progressbar(length=total, label=self.label, file=sys.stderr)
            self.bar.__enter__()
        self.bar.update(done - self.bar.pos)

    def close(self) -> None:
        if self.bar is not None:
            self.bar.__exit__(None, None, None)
            self.bar = None


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(__version__, prog_name="envelope")
def main() -> None:
    """Safety-envelope and clearance checks for six-axis industrial robot arms.

    Every target of a cell file, in every inverse-kinematics branch, against every fence, guard and
    keep-out zone. Exit codes: 0 clear, 1 a finding, 2 bad input, 3 internal error.
    """


def _summary_line(result) -> str:
    counts: dict = {}
    for row in result.rows:
        counts[row.status] = counts.get(row.status, 0) + 1
    parts = ", ".join(f"{n} {s}" for s, n in sorted(counts.items()))
    return f"verdict: {result.verdict.upper()}  ({len(result.rows)} target x branch rows: {parts})"


CHECK_SPACE_PITCH_MM = 40.0
"""Voxel edge (mm) of the space check inside ``envelope check`` (``envelope space`` defaults to 20 mm)."""


def _run_check_and_report(cell_path: Path, out: Path, jobs: int, as_json: bool,
                          pitch_mm: float = CHECK_SPACE_PITCH_MM):
    from .cell import load_cell
    from .check import check_cell
    from .report import write_report
    from .spacecheck import write_space_outputs

    cell = load_cell(cell_path)
    progress = _Progress("checking")
    try:
        result = check_cell(cell, jobs=jobs, progress=progress, space_pitch=_pitch_metres(pitch_mm))
    finally:
        progress.close()
    files = write_report(result, out, jobs=jobs)
    files.update(write_space_outputs(result.space, out))
    if as_json:
        click.echo(json.dumps(_json_summary(result, files), indent=2, sort_keys=True))
    else:
        click.echo(_summary_line(result))
        worst = [i for i in result.worst_first() if result.rows[i].twin_of < 0]
        for row_index in worst[:10]:
            row = result.rows[row_index]
            if row.status == "clear":
                break
            click.echo(f"  {_row_text(row)}")
        click.echo(_space_line(result.space))
        click.echo(f"report: {files['report.html']}")
    return result


def _pitch_metres(pitch_mm: float) -> float:
    from .units import to_metres

    return float(to_metres(pitch_mm, "mm"))


def _space_line(space) -> str:
    bad = [v for v in space.panels if v.verdict != "pass"]
    devices = [d for d in space.devices if not d.passes]
    return (f"space: {len(space.panels) - len(bad)}/{len(space.panels)} fence panels pass, "
            f"{len(space.crushing)} crushing point(s), {len(devices)}/{len(space.devices)} device(s) too close "
            f"({space.risk} risk, restricted space over the {space.limits_source})")


def _row_text(row) -> str:
    import numpy as np

    from .units import to_mm

    if np.isnan(row.clearance):
        return f"{row.target:<20} {row.branch:<14} {row.status:<15} {row.note}"
    return (
        f"{row.target:<20} {row.branch:<14} {row.status:<15} clearance {to_mm(row.clearance):9.1f} mm "
        f"(required {to_mm(row.required):.0f}) {row.closest_body} - {row.closest_other}"
        + (f"  [{row.note}]" if row.note else "")
    )


def _json_summary(result, files) -> dict:
    return {
        "verdict": result.verdict,
        "exit_code": result.exit_code,
        "rows": len(result.rows),
        "findings": len(result.findings()),
        "files": {name: str(path) for name, path in files.items()},
    }


@main.command(epilog=CAUTION_HELP)
@click.argument("cell", type=click.Path(path_type=Path))
@click.option("--out", "out", type=click.Path(path_type=Path), default=Path("envelope-report"),
              show_default=True, help="Folder for the clearance table, report and scenes.")
@click.option("--jobs", type=click.IntRange(1, 256), default=1, show_default=True,
              help="Worker processes for the clearance computation (results are identical).")
@click.option("--json", "as_json", is_flag=True, help="Print a machine-readable summary on stdout.")
@click.option("--pitch", "pitch_mm", type=click.FloatRange(min=1.0, max=500.0), default=CHECK_SPACE_PITCH_MM,
              show_default=True, metavar="MM",
              help="Voxel edge of the maximum, restricted and operating spaces, mm (coarser than `envelope space`'s "
                   "default to keep the check quick; a coarser space over-approximates more).")
@_guarded
def check(cell: Path, out: Path, jobs: int, as_json: bool, pitch_mm: float) -> None:
    """Check every target of CELL in every IK branch (and its programs, if any), and its spaces.

    Writes clearance.csv, clearance.json, report.html, report.pdf and .glb scenes to --out, and the
    space check's files (see `envelope space`). Exit code 0 when every target has a within-limits
    branch and every such branch (and motion) is clear, 1 when there is any finding, 2 for bad input.
    """
    result = _run_check_and_report(cell, out, jobs, as_json, pitch_mm)
    sys.exit(result.exit_code)


@main.command(epilog=CAUTION_HELP)
@click.argument("cell", type=click.Path(path_type=Path))
@click.option("--out", "out", type=click.Path(path_type=Path), default=Path("envelope-space"),
              show_default=True, help="Folder for the spaces (STL, glTF), fences.csv, crushing.csv, space.json.")
@click.option("--risk", type=click.Choice(["high", "low"]), default=None,
              help="ISO 13857 risk level (reach-over table); the cell file's 'risk' (default high) if not given.")
@click.option("--pitch", "pitch_mm", type=click.FloatRange(min=1.0, max=500.0), default=20.0, show_default=True,
              metavar="MM", help="Voxel edge of the spaces, mm.")
@click.option("--jobs", type=click.IntRange(1, 256), default=1, show_default=True,
              help="Worker processes for the check that picks the usable branches.")
@_guarded
def space(cell: Path, out: Path, risk, pitch_mm: float, jobs: int) -> None:
    """Maximum, restricted and operating space of CELL, judged against its fences, fixed objects and
    protective devices, with suggested axis limits.

    Exit code 0 when every fence panel passes, there is no crushing point and every protective device
    is far enough; 1 otherwise; 2 for bad input.
    """
    from .cell import load_cell
    from .check import check_cell
    from .spacecheck import write_space_outputs

    cell_model = load_cell(cell)
    sc = check_cell(cell_model, jobs=jobs, space_pitch=_pitch_metres(pitch_mm), risk=risk).space
    files = write_space_outputs(sc, out)
    click.echo(_space_line(sc))
    for v in sc.panels:
        if v.verdict != "pass":
            click.echo(f"  panel {v.panel}: {v.verdict}: {'; '.join(v.reasons)}")
    for c in sc.crushing:
        click.echo(f"  crushing point: {c.panel} gap {c.gap_mm:.0f} mm < {c.check.min_gap_mm} mm"
                   + (" (touches)" if c.touches else ""))
    for d in sc.devices:
        if not d.passes:
            click.echo(f"  device {d.name}: {d.check.note}")
    for k in sc.keepouts:
        if not k.passes:
            click.echo(f"  keep-out {k.zone}: {k.distance_mm:.0f} mm from the space < {k.required_mm:g} mm "
                       "(reported, not counted)")
    sug = sc.suggestion
    click.echo(("suggested axis limits: " if sug.found else "no suggested axis limits: ") + sug.reason)
    click.echo(f"files: {out} ({', '.join(sorted(files))})")
    sys.exit(EXIT_CLEAR if sc.passes else EXIT_FINDING)


@main.command(epilog=CAUTION_HELP)
@click.argument("cell", type=click.Path(path_type=Path))
@click.option("--program", default=None, help="Sweep only this program (default: every program).")
@click.option("--out", "out", type=click.Path(path_type=Path), default=Path("envelope-sweep"),
              show_default=True, help="Folder for the motion table and report.")
@click.option("--json", "as_json", is_flag=True, help="Print a machine-readable summary on stdout.")
@_guarded
def sweep(cell: Path, program: str | None, out: Path, as_json: bool) -> None:
    """Certify the motions of CELL's programs, in every valid start branch (no target rows).

    Each move is swept by conservative advancement: the reported clearance is a certified lower
    bound over the whole move, with the stopping allowance added to the required clearance.
    Exit codes as for check: 0 every motion clear, 1 a finding, 2 bad input.
    """
    from .cell import load_cell
    from .check import CheckResult, run_motions
    from .errors import ProgramError
    from .report import write_report

    cell_model = load_cell(cell)
    motions = run_motions(cell_model, program)
    if not motions:
        raise ProgramError("the cell has no programs to sweep", file=cell, item="programs")
    result = CheckResult(cell=cell_model, rows=(), motions=motions, warnings=tuple(cell_model.warnings))
    files = write_report(result, out)
    if as_json:
        click.echo(json.dumps(_json_summary(result, files), indent=2, sort_keys=True))
    else:
        click.echo(f"verdict: {result.verdict.upper()}  ({len(motions)} move x branch rows)")
        for m in sorted(motions, key=lambda m: m.min_clearance - m.required)[:10]:
            click.echo(f"  {_motion_text(m)}")
        click.echo(f"report: {files['report.html']}")
    sys.exit(result.exit_code)


def _motion_text(m) -> str:
    from .units import to_mm

    where = f"at s={m.where:.3f}" if m.where == m.where else ""
    return (
        f"{m.program} move {m.move} {m.from_target} -> {m.to_target} ({m.motion}, {m.branch}): {m.status}, "
        f"clearance >= {to_mm(m.min_clearance):.1f} mm (required {to_mm(m.required):.1f}) {where} "
        f"{m.closest_body} - {m.closest_other}"
    ).rstrip()


@main.command(epilog=CAUTION_HELP)
@click.argument("cell", type=click.Path(path_type=Path))
@click.option("--pose", required=True, metavar='"X Y Z RX RY RZ"',
              help="TCP pose: position in mm and Euler angles in degrees (see --convention).")
@click.option("--frame", default="world", show_default=True, help="Frame the pose is given in.")
@click.option("--convention", default="fixed-xyz", show_default=True,
              help="Euler convention of RX RY RZ (fixed-xyz = roll-pitch-yaw about fixed axes).")
@click.option("--json", "as_json", is_flag=True, help="Print the branch table as JSON.")
@_guarded
def solve(cell: Path, pose: str, frame: str, convention: str, as_json: bool) -> None:
    """Print every IK branch of one TCP pose for the arm of CELL (no clearance check)."""
    from .cell import load_cell
    from .check import solve_pose

    cell_model = load_cell(cell)
    try:
        values = [float(v) for v in pose.replace(",", " ").split()]
    except ValueError:
        raise InputError(f"expected 6 numbers, got {pose!r}", item="--pose") from None
    if len(values) != 6:
        raise InputError(f"expected 6 numbers (x y z in mm, 3 angles in deg), got {len(values)}", item="--pose")
    table = solve_pose(cell_model, values[:3], values[3:], frame=frame, convention=convention)
    if as_json:
        click.echo(json.dumps(table, indent=2, sort_keys=True))
        return
    click.echo(f"pose {pose!r} in frame {frame!r}: {table['summary']}")
    if not table["branches"]:
        click.echo(f"  no solution: {table['reason']}")
        return
    click.echo(f"  {'branch':<16}{'q1':>9}{'q2':>9}{'q3':>9}{'q4':>9}{'q5':>9}{'q6':>9}  notes")
    for b in table["branches"]:
        qs = "".join(f"{v:9.3f}" for v in b["q_deg"])
        click.echo(f"  {b['branch']:<16}{qs}  {b['notes']}")


@main.command("map", epilog=CAUTION_HELP)
@click.argument("cell", type=click.Path(path_type=Path))
@click.option("--region", required=True, metavar="X0:X1,Y0:Y1,Z0:Z1",
              help="TCP positions to evaluate, mm in --frame (a plane section: equal ends on one axis).")
@click.option("--step", required=True, metavar="MM[,MM,MM]", help="Grid spacing in mm (one, or one per axis).")
@click.option("--orientation", "orientation", default="180,0,0", show_default=True, metavar='"A,B,C;..."',
              help="Tool orientations as Euler angles in degrees (see --convention), ';' between several.")
@click.option("--convention", default="fixed-xyz", show_default=True, help="Euler convention of --orientation.")
@click.option("--frame", default="world", show_default=True, help="Frame of --region and --orientation.")
@click.option("--point", default=None, metavar="X,Y,Z", help="Grow the largest clear box around this point (mm).")
@click.option("--out", "out", type=click.Path(path_type=Path), default=Path("envelope-map"), show_default=True,
              help="Folder for map.npz, the slice images and the summary (and the resumable chunks).")
@click.option("--jobs", type=click.IntRange(1, 256), default=1, show_default=True, help="Local worker processes.")
@click.option("--dask", default=None, metavar="ADDRESS|local",
              help="Run the chunks on a Dask cluster (needs 'envelope[dask]'); 'local' starts a LocalCluster.")
@click.option("--chunk", "chunk_size", type=click.IntRange(1, 10_000_000), default=2048, show_default=True,
              help="Poses per chunk (a resumed map needs the same value).")
@click.option("--max-points", type=click.IntRange(1), default=50_000_000, show_default=True,
              help="Refuse grids with more poses than this.")
@_guarded
def map_command(cell: Path, region: str, step: str, orientation: str, convention: str, frame: str, point,
                out: Path, jobs: int, dask, chunk_size: int, max_points: int) -> None:
    """Layout study: clear IK branches and best clearance over a grid of TCP positions of CELL.

    An interrupted map resumes from the finished chunks in OUT/chunks. Exit code 0 when it was
    written, 2 for bad input.
    """
    from . import mapping
    from .cell import load_cell

    cell_model = load_cell(cell)
    grid = mapping.make_grid(cell_model, mapping.parse_region(region), mapping.parse_step(step),
                             mapping.parse_orientations(orientation), convention=convention, frame=frame,
                             max_points=max_points)
    point_mm = mapping.parse_point(point) if point else None
    bar = _MapProgress()
    try:
        result = mapping.run_map(cell_model, grid, jobs=jobs, dask=dask, chunk_size=chunk_size,
                                 chunk_dir=Path(out) / "chunks", progress=bar)
    finally:
        bar.close()
    files = mapping.write_map(result, out, point_mm=point_mm, cell=cell_model)
    summary = mapping.summarize(result, point_mm)
    for k, (reach, clear) in enumerate(zip(summary.reachable_fraction, summary.clear_fraction)):
        click.echo(f"orientation {k + 1}: reachable {100 * reach:.1f} %, reachable and clear {100 * clear:.1f} % "
                   f"of {summary.n_positions} positions")
    click.echo(f"clear at every orientation: {100 * summary.clear_all_fraction:.1f} %")
    if summary.point_mm is not None:
        click.echo(f"largest clear box around {summary.point_mm}: +-{summary.box_half_mm} mm ({summary.box_limit})")
    click.echo(f"map: {files.npz}")


class _MapProgress(_Progress):
    """The map's bar: poses done, with the chunk rate and the estimated time left."""

    def __init__(self):
        super().__init__("mapping")

    def __call__(self, done, total, rate=float("nan"), eta=float("nan")) -> None:
        if self.enabled and self.bar is None and total > 0:
            self.bar = click.progressbar(length=total, label=self.label, file=sys.stderr, show_eta=False,
                                         item_show_func=lambda _: self.text)
            self.bar.__enter__()
        self.text = "" if rate != rate else f"{rate:,.0f} poses/s, {eta:,.0f} s left"
        super().__call__(done, total)


@main.command()
@click.option("--out", "out", type=click.Path(path_type=Path), default=Path("envelope-demo"),
              show_default=True, help="Folder for the demo report.")
@click.option("--jobs", type=click.IntRange(1, 256), default=1, show_default=True)
@_guarded
def demo(out: Path, jobs: int) -> None:
    """Run the check on the bundled demo cell and say where the report is.

    The demo cell is designed to show every status, so it always has findings; the command exits 0
    when the report was written.
    """
    from .demo import demo_cell_path

    click.echo(f"demo cell: {demo_cell_path()}")
    _run_check_and_report(demo_cell_path(), out, jobs, as_json=False)
    sys.exit(EXIT_CLEAR)


@main.command()
@click.argument("folder", type=click.Path(path_type=Path))
@_guarded
def init(folder: Path) -> None:
    """Write a commented starter cell file and targets CSV into FOLDER, to edit."""
    from .starter import write_starter

    for path in write_starter(folder):
        click.echo(f"wrote {path}")


if __name__ == "__main__":  # pragma: no cover
    main()
