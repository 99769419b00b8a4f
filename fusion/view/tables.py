"""Tables of the measuring commands (bench, targets, fidelity, calibrate, soak), drawn with rich.

Each takes the typed rows its job returned and draws them; nothing here computes a figure."""

from __future__ import annotations

from rich import box
from rich.table import Table

from fusion.text import literal
from fusion.view.fitting import Column, fitted_tables, footnoted

__all__ = ["bench_table", "targets_table", "fidelity_table", "calibration_tables", "soak_table"]


def bench_table(rows, width: int = 120) -> list:
    """``fusion bench``'s cost rows (``fusion.bench.BenchRow``) as tables that fit ``width``, notes as footnotes."""
    marks, notes = footnoted([r.note for r in rows])
    cells = []
    for r, mark in zip(rows, marks):
        grid = r.size.split(" (")[0]
        peak = "" if r.peak_copies is None else f"{r.peak_copies:.1f} beliefs"
        ratio = "" if r.ratio != r.ratio else f"{r.ratio:.2f}×" if r.ratio < 10 else f"{r.ratio:.1f}×"  # NaN: no floor
        floor = _ms(r.floor_ms) if r.floor_ms else ""
        slowest = "" if r.slowest_ratio is None else f"{r.slowest_ratio:.2f}×"
        cells.append([grid, r.backend, r.operation, _ms(r.best_ms), floor, ratio, slowest, peak, mark])
    keys = [Column("grid"), Column("back end"), Column("operation")]
    heads = ("ms", "floor ms", "ratio", "slowest input", "peak memory", "note")
    values = [Column(h, "right") for h in heads]
    sizes = sorted({r.size for r in rows}, key=len)
    out: list = fitted_tables(
        "Back-end cost as a ratio to a floor measured in the same run", keys, values, cells, width
    )
    out += [f"grids: {', '.join(sizes)}", *notes]
    out.append(
        "floor: Bayes and evidential = one multiply-and-normalise pass (Bayes predict: a memory copy); focal sets "
        "and Dempster's rule = bare AND of all focal-set word pairs; compiled loops = their numpy code. CPU time. "
        "Grid and frame rows take several inputs in turn: ms is the median input's fastest run, ratio its time over "
        "the floor's (timed alike), slowest input the slowest input's; other rows: fastest of repeated runs after a "
        "warm-up (stream lines: one run; start-ups: wall time of fresh processes). Peak memory of one call via "
        "tracemalloc."
    )
    return out


def _ms(value: float) -> str:
    """Milliseconds with a tenth of a millisecond, or three significant figures below 1 ms."""
    return f"{value:.1f}" if value >= 1 else f"{value:.3g}"


def targets_table(rows) -> Table:
    """``fusion targets``' verdicts (``fusion.targets.TargetRow``)."""
    table = Table(title="Monitor targets on the fault cases")
    for col in ("case", "back end", "runs", "success", "share"):
        table.add_column(col, justify="right" if col in ("runs", "success", "share") else "left")
    keys = sorted({(r.case, r.backend) for r in rows})
    for case, backend in keys:
        mine = [r for r in rows if r.case == case and r.backend == backend]
        good = sum(r.success for r in mine)
        table.add_row(case, backend, str(len(mine)), str(good), f"{good / len(mine):.0%}" if mine else "")
    return table


def fidelity_table(rows, width: int = 120) -> list:
    """The evidential outputs' distances from the exact mass function (``fusion.fidelity.FidelityRow``)."""
    marks, notes = footnoted([r.note for r in rows])
    cells = [[r.output, r.reading, f"{r.distance:.3g}", r.measure, m] for r, m in zip(rows, marks)]
    keys = [Column("output")]
    values = [Column("how the contour filter gets it"), Column("distance", "right"), Column("measure"), Column("where")]
    title = "Fidelity: evidential outputs against the exact mass function (small site)"
    out: list = fitted_tables(title, keys, values, cells, width)
    out += notes
    out.append(
        "Largest distance over the ticks. Exact: the focal-set filter with no cap; readings are discounted "
        "consonant contours on random levels per cell (a harsh case: real readings are smooth)."
    )
    return out


def calibration_tables(result, case) -> list:
    """``fusion calibrate``'s result (``fusion.calibration.pipeline.Calibration``): a table per sensor under the
    parameters' full names, the reliability footnote and the warnings."""
    out: list = []
    longest = max((len(n) for e in result.summary for n in e.parameters), default=9)
    for entry in result.summary:
        spec = case.sensor(entry.sensor)
        method = "/".join(dict.fromkeys(entry.methods))
        table = Table(title=f"{literal(entry.sensor)} ({entry.kind}, {method}, {entry.points:,} points)")
        for col in ("parameter", "case", "fitted", "90% interval", "R-hat", "ESS"):
            # no cell is cut or wrapped: a shortened name cannot be looked up, a wrapped number is misread
            table.add_column(
                col,
                justify="left" if col == "parameter" else "right",
                no_wrap=True,
                min_width=longest if col == "parameter" else None,
            )
        for name, est in entry.parameters.items():
            table.add_row(
                name,
                f"{getattr(spec.params, name):.3g}",
                f"{est.mean:.3g}",
                f"{est.low:.3g}–{est.high:.3g}",
                _maybe(est.r_hat, "{:.3f}"),
                _maybe(est.ess, "{:.0f}"),
            )
        if entry.reliability is not None:
            table.add_row("reliability*", f"{spec.params.reliability:.3g}", f"{entry.reliability:.3g}", "", "", "")
        out.append(table)
    if any(e.reliability is not None for e in result.summary):
        out.append("* reliability: the 5% lower credible bound of the share of readings the working model explains")
    for entry in result.summary:
        for w in entry.warnings:
            out.append(f"[yellow]warning[/] {literal(entry.sensor)}: {literal(w)}")
    return out


def soak_table(records, case_name: str, lines: bool, out_dir) -> list:
    """``fusion soak``'s reports (``fusion.soak.SoakReport``), one row per back end, and the key to the columns."""
    from fusion.soak import MEMORY_EVERY, SUM_TOLERANCE

    table = Table(
        title=f"soak of {literal(case_name)}: {'stream lines' if lines else 'localizer steps'}", box=box.SIMPLE_HEAD
    )
    for col in ("back end", "steps", "ms/step", "|Σ−1|", "min", "focal", "NaN", "rej.", "MiB"):
        table.add_column(col, justify="right", no_wrap=True)
    for r in records:
        mem = r.memory_mb
        table.add_row(
            r.backend,
            f"{r.steps:,}" + ("*" if r.interrupted else ""),
            f"{r.seconds / max(r.steps, 1) * 1e3:.2f}",
            f"{r.worst_sum_error:.0e}",
            f"{r.lowest_value:.0e}",
            f"{r.most_focal_sets}/{r.focal_bound}" if r.focal_bound else "–",
            str(r.nan_decisions),
            f"{r.rejected:,}",
            f"{mem[1][1] if len(mem) > 2 else mem[0][1]:.0f}→{mem[-1][1]:.0f}",
        )
    return [
        table,
        f"|Σ−1|: worst distance of the belief's total from 1 (limit {SUM_TOLERANCE:g}); min: lowest mass or "
        f"probability; focal: most focal sets / bound; rej.: rejected steps or lines; MiB: resident memory after the first {MEMORY_EVERY:,} "
        f"steps (warm-up) → at the end{'; * interrupted' if any(r.interrupted for r in records) else ''}. "
        f"Written to {out_dir / 'soak.json'}",
    ]


def _maybe(value, fmt: str) -> str:
    import math

    return "" if value is None or not math.isfinite(value) else fmt.format(value)


def cases_table(rows: list[tuple[str, str]], folder: str) -> list:
    """``fusion cases``: each shipped case by the name commands accept, with what it stresses."""
    table = Table(title="Shipped cases (use the name anywhere a case file is asked for)")
    table.add_column("name", no_wrap=True)
    table.add_column("what it stresses", overflow="fold")
    for name, words in rows:
        table.add_row(name, literal(words))
    return [table, f"They are in {literal(folder)}; copy one to start a case of your own (cases/README.md)."]
