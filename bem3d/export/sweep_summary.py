"""A sweep's summary: summary.csv (one row per case) and summary.png (the change of the entries
against the first swept parameter)."""

import math

from bem3d.base.files import atomic_path, write_text
from bem3d.base.units import format_quantity, prefix_for
from bem3d.export.names import csv_cell, csv_text


def entry_column(entry):
    """Summary column of an entry (matrix, A, B): 'mutual_F:top:bottom' (F)."""
    return f"{entry[0]}_F:{entry[1]}:{entry[2]}"


def write_summary(rows, target):
    """summary.csv: one row per case, written atomically. Text cells (labels, columns named
    after conductors, error messages) are made safe with names.csv_cell; numbers stay."""
    columns = list(rows[0])
    write_text(target, csv_text([[csv_cell(c) for c in columns]]
                                + [[csv_cell(v) if isinstance(v, str) and not _number(v)
                                    else "" if v is None else str(v)
                                    for v in (r[c] for c in columns)]
                                   for r in rows]))


def _number(text):
    try:
        float(text)
    except ValueError:
        return False
    return True


def plot_summary(rows, x_column, group_columns, entries, target):
    """summary.png: the change of each entry from the first finished case of its line (ΔC)
    against x_column (numeric, or the cases in order when categorical), one line per entry and
    combination of the group columns; hollow markers for cases with warnings, a red x on the
    axis for failed cases. Returns target, or None if no case finished."""
    from matplotlib.figure import Figure  # heavy: loaded only to draw

    ok = [r for r in rows if r["status"] == "ok"]
    if not ok:
        return None
    categorical = any(isinstance(r[x_column], str) for r in rows)
    position = {id(r): i if categorical else float(r[x_column]) for i, r in enumerate(rows)}
    groups = {}
    for r in ok:
        groups.setdefault(tuple(r[c] for c in group_columns), []).append(r)
    lines = []              # (label, x, ΔC (F), warned)
    for group, members in groups.items():
        suffix = "".join(f", {c}={v:g}" for c, v in zip(group_columns, group))
        for e in entries:
            col = entry_column(e)
            values = [float(m[col]) if m[col] else math.nan for m in members]
            first = next((v for v in values if not math.isnan(v)), math.nan)
            lines.append((f"{e[0]} {e[1]}:{e[2]}{suffix} (first {format_quantity(first, 'F')})",
                          [position[id(m)] for m in members], [v - first for v in values],
                          [bool(m.get("warnings")) for m in members]))
    scale, prefix = prefix_for([d for *_, deltas, _ in lines for d in deltas
                                if not math.isnan(d)] or [0.0])
    fig = Figure(figsize=(8, 5))
    ax = fig.add_subplot()
    for label, x, deltas, warned in lines:
        y = [d / scale for d in deltas]
        colour = ax.plot(x, y, label=label)[0].get_color()
        for hollow in (False, True):
            pick = [i for i, w in enumerate(warned) if w == hollow]
            ax.plot([x[i] for i in pick], [y[i] for i in pick], "o", color=colour,
                    markerfacecolor="none" if hollow else colour)
    if any(any(warned) for *_, warned in lines):
        ax.plot([], [], "o", color="black", markerfacecolor="none", label="case with warnings")
    failed = [position[id(r)] for r in rows if r["status"] == "failed"]
    if failed:              # on the x axis: a failed case has no value to place it by
        ax.plot(failed, [0.0] * len(failed), "x", color="red", markersize=9, clip_on=False,
                transform=ax.get_xaxis_transform(), label="failed case")
    if categorical:
        ax.set_xticks(range(len(rows)), [r["label"] for r in rows], rotation=60)
    ax.axhline(0.0, color="grey", linewidth=0.6)
    ax.set_xlabel("case" if categorical else x_column)
    ax.set_ylabel(f"change from the first case, ΔC [{prefix}F]")
    ax.grid(True, alpha=0.3)
    ax.legend(fontsize="small")
    fig.tight_layout()
    with atomic_path(target) as tmp:
        fig.savefig(tmp, dpi=110)
    return target
