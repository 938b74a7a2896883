"""The data the page's scenario explorer and project search carry, aggregated in DuckDB.

Embedding rule (stated in the page and the README):

* **Every project** when the run is small: at most :data:`FULL_EMBED_PROJECTS` projects and at most
  :data:`FULL_EMBED_CELLS` project-scenario cells. The ranked table then lists every project in
  every scenario, and every project has its drill-down.
* **Large runs**: the ranked table of each scenario lists its :data:`TABLE_TOP` projects of highest
  present worth (exact ranks: every project above them is listed too); at most
  :data:`MAX_EMBEDDED_DRILL` projects carry a drill-down, chosen in this order: those named with
  ``--project``, the leading :data:`HEADLINE_LEADERS` of each headline (highest base worth among those
  accepted everywhere, the largest drops under high inflation, the widest rank spreads, the most
  often selected), then scenario-dependent projects (accepted in some scenarios only) by best median
  rank. The search says when a project is not embedded and which command draws it.

Present worths travel as four significant digits (:func:`worth_codes`: integers at one power of ten
per project or scenario, a negative worth never rounded to zero, so "accepted" is the database's);
where rounding ties or reorders two projects of a scenario, ``fix`` carries that scenario's stored
order for the stretch concerned, so the ranked table is always the database's order. Selections are
bit strings (:func:`selection_bits`); contour vertices are rounded to 1e-5 (a thousandth of a
percentage point).
"""
from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

import numpy as np
import polars as pl

from ratescape.report.chart_style import cell_edges, clipped_worth_domain, plain_input, sensitivity_input_label
from ratescape.report.contours import nice_levels, place_contour_labels, surface_contours
from ratescape.report.run_data import RunContext, column_names, query_frame, quote_ident, thin_levels

FULL_EMBED_PROJECTS = 2_000
FULL_EMBED_CELLS = 400_000
TABLE_TOP = 50
MAX_EMBEDDED_DRILL = 60
HEADLINE_LEADERS = 5
#: Most inflation lines of a drill-down worth curve.
CURVE_LINES = 11

#: Scenario columns that are never an axis of the controls.
_NOT_AXES = {"run_id", "scenario_id", "discount_rate", "real_rate", "inflation", "weight", "is_base", "scenario_key"}


def worth_decimals(max_abs: float) -> int:
    """Decimal places keeping about nine significant digits of ``max_abs`` (0 to 6).

    >>> worth_decimals(1.9e7), worth_decimals(120.0)
    (1, 6)
    """
    if not math.isfinite(max_abs) or max_abs <= 0:
        return 6
    return int(min(6, max(0, 9 - math.ceil(math.log10(max_abs)))))


#: Significant digits of the present worths in the page (the table shows 4 in k or M).
WORTH_DIGITS = 4


def worth_codes(values: np.ndarray) -> tuple[int, list]:
    """Present worths to :data:`WORTH_DIGITS` significant digits as ``(e, codes)``, worth = code x 10**e.

    ``e`` puts the largest magnitude at four digits before the point, so most codes are short
    integers; smaller worths keep four significant digits as decimals. A negative worth stays
    negative (accepted means worth >= 0). NaN is ``None``.

    >>> worth_codes(np.array([19_228_835.0, -0.3456, 1234.56, np.nan]))
    (4, [1923, -3.456e-05, 0.1235, None])
    """
    v = np.asarray(values, dtype=float)
    finite = np.isfinite(v)
    big = float(np.max(np.abs(v[finite]))) if finite.any() else 0.0
    e = int(math.floor(math.log10(big))) - (WORTH_DIGITS - 1) if big > 0 else 0
    out: list = [None] * v.size
    nz = finite & (v != 0)
    k = np.zeros(v.size, dtype=np.int64)
    k[nz] = np.floor(np.log10(np.abs(v[nz]))).astype(np.int64) - (WORTH_DIGITS - 1)
    mant = np.zeros(v.size, dtype=np.int64)
    mant[nz] = np.round(v[nz] / 10.0 ** k[nz]).astype(np.int64)
    for n in np.flatnonzero(finite).tolist():
        m, kk = int(mant[n]), int(k[n])
        if m == 0:
            out[n] = 0
        elif kk >= e:
            out[n] = m * 10 ** (kk - e)
        else:
            out[n] = m / 10 ** (e - kk)
    return e, out


def decoded_worths(e: int, codes: list) -> np.ndarray:
    """The worths the page reads back from :func:`worth_codes` (NaN for ``None``)."""
    return np.array([np.nan if c is None else c * 10.0 ** e for c in codes], dtype=float)


def selection_bits(indices: Sequence[int], n: int) -> str:
    """Project indices as a hex string, four projects a character, project ``i`` in bit ``i % 4``.

    >>> selection_bits([0, 5], 8)
    '12'
    """
    nibbles = [0] * ((n + 3) // 4)
    for i in indices:
        nibbles[i >> 2] |= 1 << (i & 3)
    return "".join("0123456789abcdef"[b] for b in nibbles)


def _order_fixes(pw: np.ndarray, ids: list[str], decoded: np.ndarray) -> dict[str, list[int]]:
    """Per scenario where the rounded worths would order the table differently from the stored ones:
    ``[start, row, row, ...]``, the stored order of the stretch that differs (rows of ``pw``)."""
    fixes: dict[str, list[int]] = {}
    if pw.size == 0:
        return fixes
    id_rank = np.argsort(np.argsort(np.array(ids, dtype=object)))
    for s in range(pw.shape[1]):
        ok = np.flatnonzero(np.isfinite(pw[:, s]))
        exact = ok[np.lexsort((id_rank[ok], -pw[ok, s]))]
        shown = ok[np.lexsort((id_rank[ok], -decoded[ok, s]))]
        diff = np.flatnonzero(exact != shown)
        if diff.size:
            a, b = int(diff[0]), int(diff[-1])
            fixes[str(s)] = [a, *exact[a:b + 1].tolist()]
    return fixes


def _rounded(values: np.ndarray, decimals: int) -> list:
    v = np.round(np.asarray(values, dtype=float), decimals)
    if decimals == 0:
        return [None if not math.isfinite(a) else int(a) for a in v.tolist()]
    return [None if not math.isfinite(a) else a for a in v.tolist()]


def extra_axes(ctx: RunContext) -> list[str]:
    """Scenario columns beyond the two rate axes with more than one value in this run."""
    out = []
    for c in column_names(ctx.con, "scenarios"):
        if c in _NOT_AXES:
            continue
        n = ctx.con.execute(f"SELECT count(DISTINCT {quote_ident(c)}) FROM scenarios WHERE run_id = ?",
                            [ctx.run_id]).fetchall()[0][0]
        if n > 1:
            out.append(c)
    return out


def explorer_data(ctx: RunContext, drill_first: Sequence[str], leaders: Sequence[str]) -> dict[str, Any]:
    """Everything the explorer and the drill-down draw, as one JSON-ready dict.

    Parameters
    ----------
    ctx : RunContext
    drill_first : sequence of str
        Project ids named by the reader (``--project``); always embedded with their drill-down.
    leaders : sequence of str
        The leading projects of each headline, embedded next.
    """
    con, run_id = ctx.con, ctx.run_id
    axes_cols = [ctx.x, "inflation", *extra_axes(ctx)]
    sc = query_frame(con, "SELECT scenario_id, scenario_key, discount_rate, real_rate, inflation"
                     + "".join(f", {quote_ident(c)}" for c in axes_cols[2:])
                     + " FROM scenarios WHERE run_id = ? ORDER BY scenario_id", [run_id])
    n_s = sc.height
    pos_of_key = {int(k): i for i, k in enumerate(sc["scenario_key"].to_list())}
    # one pass over the rows: accepted count per scenario
    acc = con.execute("""SELECT scenario_key, count(*) FILTER (WHERE present_worth >= 0)
                         FROM result_rows WHERE scenario_key IN (SELECT scenario_key FROM scenarios WHERE run_id = ?)
                         GROUP BY scenario_key""", [run_id]).fetchall()
    accepted = [0] * n_s
    for key, n in acc:
        accepted[pos_of_key[int(key)]] = int(n)
    worth: list[Any] = [None] * n_s
    n_selected = [None] * n_s
    pos_of_id = {int(s): i for i, s in enumerate(sc["scenario_id"].to_list())}
    if "portfolios" in ctx.tables:
        for sid, obj, k in con.execute("SELECT scenario_id, objective, projects_selected FROM portfolios "
                                       "WHERE run_id = ?", [run_id]).fetchall():
            if int(sid) in pos_of_id:
                worth[pos_of_id[int(sid)]] = obj
                n_selected[pos_of_id[int(sid)]] = k
    axes = []
    grid_index = []
    for c in axes_cols:
        vals = sorted({float(v) for v in sc[c].to_list() if v is not None})
        axes.append({"key": c, "values": vals})
        where = {v: i for i, v in enumerate(vals)}
        grid_index.append([where[float(v)] for v in sc[c].to_list()])
    cells = {",".join(str(g[i]) for g in grid_index): i for i in range(n_s)}
    base_pos = pos_of_id.get(int(ctx.base["scenario_id"]), 0) if ctx.base else 0

    n_p = ctx.project_count
    full = n_p <= FULL_EMBED_PROJECTS and n_p * n_s <= FULL_EMBED_CELLS
    summary_cols = "ps.project_id, ps.project_key, p.name, ps.accept_share, ps.rank_min, ps.rank_median, ps.rank_max"
    sel_share = ("(SELECT selected_share FROM portfolio_summary q WHERE q.run_id = ps.run_id "
                 "AND q.project_id = ps.project_id)" if "portfolio_summary" in ctx.tables else "NULL")
    top_keys: list[list[int]] = []
    top_pw: list[list[float]] = []
    if full:
        proj = query_frame(con, f"SELECT {summary_cols}, {sel_share} AS selected_share FROM project_summary ps "
                           "LEFT JOIN run_project_names p ON p.run_id = ps.run_id AND p.project_id = ps.project_id WHERE ps.run_id = ? "
                           "ORDER BY ps.project_key", [run_id])
        drill_ids = proj["project_id"].to_list()
    else:
        tops = con.execute(f"""SELECT scenario_key, max_by(project_key, present_worth, {TABLE_TOP}),
                                      max(present_worth, {TABLE_TOP})
                               FROM result_rows WHERE scenario_key IN
                                    (SELECT scenario_key FROM scenarios WHERE run_id = ?)
                               GROUP BY scenario_key""", [run_id]).fetchall()
        top_keys = [[] for _ in range(n_s)]
        top_pw = [[] for _ in range(n_s)]
        for key, keys, pws in tops:
            top_keys[pos_of_key[int(key)]] = [int(k) for k in keys]
            top_pw[pos_of_key[int(key)]] = list(pws)
        drill_ids = _drill_choice(ctx, drill_first, leaders)
        table_keys = sorted({k for ks in top_keys for k in ks})
        proj = query_frame(con, f"SELECT {summary_cols}, {sel_share} AS selected_share FROM project_summary ps "
                           "LEFT JOIN run_project_names p ON p.run_id = ps.run_id AND p.project_id = ps.project_id WHERE ps.run_id = ? "
                           "AND (list_contains(?, ps.project_key) OR list_contains(?, ps.project_id)) "
                           "ORDER BY ps.project_key", [run_id, table_keys, drill_ids])
    idx_of_key = {int(k): i for i, k in enumerate(proj["project_key"].to_list())}
    idx_of_id = {str(p): i for i, p in enumerate(proj["project_id"].to_list())}
    drill_idx = [idx_of_id[p] for p in drill_ids if p in idx_of_id]
    # present worth of the drill-down projects in every scenario: (projects, scenarios)
    pw = np.full((len(drill_idx), n_s), np.nan)
    drill_keys = [int(proj["project_key"][i]) for i in drill_idx]
    row_of_key = {k: r for r, k in enumerate(drill_keys)}
    if drill_keys:
        got = con.execute("""SELECT project_key, scenario_key, present_worth FROM result_rows
                             WHERE list_contains(?, project_key) AND scenario_key IN
                                   (SELECT scenario_key FROM scenarios WHERE run_id = ?)""",
                          [drill_keys, run_id]).fetchnumpy()
        rows = np.array([row_of_key[int(k)] for k in got["project_key"]], dtype=np.int64)
        cols = np.array([pos_of_key[int(k)] for k in got["scenario_key"]], dtype=np.int64)
        pw[rows, cols] = got["present_worth"]
    max_abs = float(np.nanmax(np.abs(pw))) if np.isfinite(pw).any() else 0.0
    if top_pw:
        max_abs = max(max_abs, max((abs(v) for row in top_pw for v in row), default=0.0))
    dec = worth_decimals(max_abs)
    selected: list[list[int]] = [[] for _ in range(n_s)]
    if "selections" in ctx.tables:
        for sid, pids in con.execute("SELECT scenario_id, list(project_id) FROM selections WHERE run_id = ? "
                                     "GROUP BY scenario_id", [run_id]).fetchall():
            if int(sid) in pos_of_id:
                selected[pos_of_id[int(sid)]] = sorted(idx_of_id[p] for p in pids if p in idx_of_id)
    plane = _base_plane(ctx, sc, axes_cols, base_pos)
    nominal_at = _nominal_choices(sc, grid_index, len(axes[0]["values"]), len(axes[1]["values"])) \
        if ctx.x == "real_rate" else None
    codes = [worth_codes(pw[r]) for r in range(len(drill_idx))]
    decoded = (np.array([decoded_worths(e, c) for e, c in codes]) if codes else np.zeros((0, n_s)))
    data: dict[str, Any] = {
        "basis": "real" if ctx.x == "real_rate" else "nominal",
        "axes": axes, "cells": cells, "base": base_pos, "full": full, "table_top": TABLE_TOP,
        "total_projects": n_p,
        "sc": {"id": sc["scenario_id"].to_list(), "nominal": sc["discount_rate"].to_list(),
               "real": sc["real_rate"].to_list(), "inflation": sc["inflation"].to_list(),
               "accepted": accepted, "worth": _rounded(np.array(worth, dtype=float), dec),
               "selected": n_selected},
        "pr": {"id": proj["project_id"].to_list(),
               "name": [n if n is not None else "" for n in proj["name"].to_list()],
               "share": proj["accept_share"].to_list(), "rmin": proj["rank_min"].to_list(),
               "rmed": proj["rank_median"].to_list(), "rmax": proj["rank_max"].to_list(),
               "sel": proj["selected_share"].to_list()},
        "pw": {str(i): codes[r][1] for r, i in enumerate(drill_idx)},
        "pwe": {str(i): codes[r][0] for r, i in enumerate(drill_idx)},
        "selected": [selection_bits(v, proj.height) for v in selected],
        "plane": plane,
    }
    if nominal_at is not None:
        data["nominal_at"] = nominal_at
    if full:     # the table sorts the embedded worths; where rounding would reorder, the stored order
        fixes = _order_fixes(pw, [proj["project_id"][i] for i in drill_idx], decoded)
        data["fix"] = {s: [f[0], *(drill_idx[r] for r in f[1:])] for s, f in fixes.items()}
    else:
        data["top"] = [[idx_of_key[k] for k in ks] for ks in top_keys]
        top_codes = [worth_codes(np.array(p, dtype=float)) for p in top_pw]
        data["toppw"] = [c for _, c in top_codes]
        data["toppwe"] = [e for e, _ in top_codes]
    data["drill"] = _drill_extras(ctx, proj, drill_idx, pw, plane, sc)
    return data


def _nominal_choices(sc: pl.DataFrame, grid_index: list[list[int]], n_real: int, n_infl: int) -> list[list]:
    """Real-basis runs: the stored nominal rate at each (inflation level, real-rate level), as text.

    Row ``i`` lists, for every real-rate level ``j``, ``repr`` of ``scenarios.discount_rate`` of the
    scenarios at inflation level ``i`` and real rate ``j`` (``None`` where the grid has none): the
    option values of the page's ``discount_rate`` control once that inflation level is chosen. The
    nominal rate follows from the real rate and inflation alone (Fisher), so extra axes do not change it.
    """
    out: list[list] = [[None] * n_real for _ in range(n_infl)]
    for k, nominal in enumerate(sc["discount_rate"].to_list()):
        i, j = grid_index[1][k], grid_index[0][k]
        if out[i][j] is None and nominal is not None:
            out[i][j] = repr(float(nominal))
    return out


def _drill_choice(ctx: RunContext, first: Sequence[str], leaders: Sequence[str]) -> list[str]:
    ids = list(dict.fromkeys([*map(str, first), *map(str, leaders)]))
    if len(ids) < MAX_EMBEDDED_DRILL:
        more = ctx.con.execute(
            "SELECT project_id FROM project_summary WHERE run_id = ? AND accept_share > 0 AND accept_share < 1 "
            "ORDER BY rank_median NULLS LAST, project_id LIMIT ?", [ctx.run_id, MAX_EMBEDDED_DRILL]).fetchall()
        ids = list(dict.fromkeys(ids + [r[0] for r in more]))
    return ids[:max(MAX_EMBEDDED_DRILL, len(first))]


def _base_plane(ctx: RunContext, sc: pl.DataFrame, axes_cols: list[str], base_pos: int) -> dict[str, Any]:
    """Scenarios of the discount-rate x inflation plane through the base scenario, with cell edges."""
    mask = np.ones(sc.height, dtype=bool)
    for c in axes_cols[2:]:
        mask &= sc[c].to_numpy() == sc[c][base_pos]
    pos = np.flatnonzero(mask)
    xs = np.sort(np.unique(sc[ctx.x].to_numpy()[pos]))
    ys = np.sort(np.unique(sc["inflation"].to_numpy()[pos]))
    x_lo, x_hi = cell_edges(xs)
    y_lo, y_hi = cell_edges(ys)
    ix = np.searchsorted(xs, sc[ctx.x].to_numpy()[pos])
    iy = np.searchsorted(ys, sc["inflation"].to_numpy()[pos])
    curve_levels = thin_levels(ys.tolist(), CURVE_LINES)
    return {"pos": pos.tolist(), "ix": ix.tolist(), "iy": iy.tolist(), "x": xs.tolist(), "y": ys.tolist(),
            "x_lo": x_lo.tolist(), "x_hi": x_hi.tolist(), "y_lo": y_lo.tolist(), "y_hi": y_hi.tolist(),
            "curve_y": [int(np.searchsorted(ys, v)) for v in curve_levels],
            "zero_real": _zero_real_line(ctx.x, xs, ys)}


def _zero_real_line(x: str, xs: np.ndarray, ys: np.ndarray) -> list[list[float]]:
    """Points of the line where the real discount rate is zero, inside the plotted plane."""
    if xs.size < 2 or ys.size < 2:
        return []
    if x == "real_rate":
        return [[0.0, float(ys[0])], [0.0, float(ys[-1])]] if xs[0] <= 0.0 <= xs[-1] else []
    # nominal axis: real = 0 where nominal = inflation
    lo, hi = max(xs[0], ys[0]), min(xs[-1], ys[-1])
    return [[float(lo), float(lo)], [float(hi), float(hi)]] if lo < hi else []


def _drill_extras(ctx: RunContext, proj: pl.DataFrame, drill_idx: list[int], pw: np.ndarray,
                  plane: dict[str, Any], sc: pl.DataFrame) -> dict[str, Any]:
    """IRR roots, tornado, spider, contours and the colour clip of each drill-down project."""
    con, run_id = ctx.con, ctx.run_id
    ids = [proj["project_id"][i] for i in drill_idx]
    out: dict[str, dict[str, Any]] = {str(i): {"irr": [], "tornado": [], "spider": []} for i in drill_idx}
    idx_of_id = {p: i for p, i in zip(ids, drill_idx)}
    irr_col = "irr_real" if ctx.x == "real_rate" else "irr_nominal"
    basis = "real" if ctx.x == "real_rate" else "nominal"

    def label(name):   # rates named on the run's own basis
        return sensitivity_input_label(name, basis) if name in ("discount_rate", "inflation") else plain_input(name)

    ys = plane["y"]
    if "irr_roots" in ctx.tables and ids:
        for pid, f, r in con.execute(f"""SELECT project_id, inflation, {irr_col} FROM irr_roots
                                         WHERE run_id = ? AND list_contains(?, project_id)
                                           AND list_contains(?, inflation) ORDER BY project_id, inflation, root_index""",
                                     [run_id, ids, [ys[i] for i in plane["curve_y"]]]).fetchall():
            if r is not None and math.isfinite(r) and plane["x"] and plane["x"][0] <= r <= plane["x"][-1]:
                out[str(idx_of_id[pid])]["irr"].append([f, r])
    if "sensitivity" in ctx.tables and ids:
        for pid, inp, lo, hi, base in con.execute("""SELECT project_id, input, worth_low, worth_high, worth_base
                FROM sensitivity WHERE run_id = ? AND list_contains(?, project_id)
                  AND worth_low IS NOT NULL AND worth_high IS NOT NULL ORDER BY project_id, input""",
                                                  [run_id, ids]).fetchall():
            out[str(idx_of_id[pid])]["tornado"].append([label(inp), lo, hi, base])
    if "spider" in ctx.tables and ids:
        for pid, inp, ch, v in con.execute("""SELECT project_id, input, change, present_worth FROM spider
                WHERE run_id = ? AND list_contains(?, project_id) ORDER BY project_id, input, change""",
                                           [run_id, ids]).fetchall():
            out[str(idx_of_id[pid])]["spider"].append([label(inp), ch, v])
    pos = np.asarray(plane["pos"], dtype=np.int64)
    xs, ys_a = np.asarray(plane["x"]), np.asarray(plane["y"])
    x_span = float(plane["x_hi"][-1] - plane["x_lo"][0]) if xs.size else 1.0
    y_span = float(plane["y_hi"][-1] - plane["y_lo"][0]) if ys_a.size else 1.0
    for r, i in enumerate(drill_idx):
        vals = pw[r, pos]
        m, beyond = clipped_worth_domain(vals)
        entry = out[str(i)]
        entry["clip"] = m
        entry["beyond"] = beyond
        entry["lines"], entry["labels"] = [], []
        finite = vals[np.isfinite(vals)]
        if xs.size < 2 or ys_a.size < 2 or finite.size == 0:
            continue
        frame = pl.DataFrame({"x": np.asarray(plane["x"])[plane["ix"]], "y": ys_a[plane["iy"]], "pw": vals})
        levels = nice_levels(float(finite.min()), float(finite.max()), 6)
        lines = surface_contours(frame, x="x", y="y", value="pw", levels=levels)
        if lines.height:
            entry["lines"] = _packed_lines(lines)
            labels = place_contour_labels(lines, x_span=x_span, y_span=y_span)
            entry["labels"] = [[round(a, 5), round(b, 5), t] for a, b, t in labels.select("x", "y", "text").iter_rows()]
    return out


def _packed_lines(lines: pl.DataFrame) -> list[list[float]]:
    """Contour lines as ``[level, x0, y0, x1, y1, ...]`` in point order, vertices rounded to 1e-5."""
    lines = lines.sort("line", "point")
    line = lines["line"].to_numpy()
    xy = np.round(np.column_stack([lines["x"].to_numpy(), lines["y"].to_numpy()]), 5)
    level = lines["level"].to_numpy()
    cuts = np.flatnonzero(np.diff(line)) + 1
    out = []
    for a, b in zip(np.r_[0, cuts].tolist(), np.r_[cuts, line.size].tolist()):
        out.append([float(level[a]), *xy[a:b].ravel().tolist()])
    return out
