"""A sweep's summary: summary.csv (one row per case) and summary.png (entries against the first
swept parameter)."""

import math

from bem3d.base.files import atomic_path, write_text
from bem3d.base.units import prefix_for
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
    """summary.png: the entries against x_column (numeric, or case labels when categorical),
    one line per entry and combination of the group columns. Returns target, or None if no
    case finished."""
    from matplotlib.figure import Figure  # heavy: loaded only to draw

    ok = [r for r in rows if r["status"] == "ok"]
    if not ok:
        return None
    categorical = any(isinstance(r[x_column], str) for r in ok)
    values = [float(r[entry_column(e)]) for r in ok for e in entries if r[entry_column(e)]]
    scale, prefix = prefix_for(values or [0.0])
    fig = Figure(figsize=(8, 5))
    ax = fig.add_subplot()
    groups = {}
    for r in ok:
        groups.setdefault(tuple(r[c] for c in group_columns), []).append(r)
    for group, members in groups.items():
        suffix = "".join(f", {c}={v:g}" for c, v in zip(group_columns, group))
        x = [m["label"] if categorical else m[x_column] for m in members]
        for e in entries:
            col = entry_column(e)
            y = [float(m[col]) / scale if m[col] else math.nan for m in members]
            ax.plot(x, y, marker="o", label=f"{e[0]} {e[1]}:{e[2]}{suffix}")
    ax.set_xlabel("case" if categorical else x_column)
    ax.set_ylabel(f"capacitance [{prefix}F]")
    if categorical:
        ax.tick_params(axis="x", labelrotation=60)
    ax.grid(True, alpha=0.3)
    ax.legend(fontsize="small")
    fig.tight_layout()
    with atomic_path(target) as tmp:
        fig.savefig(tmp, dpi=110)
    return target
