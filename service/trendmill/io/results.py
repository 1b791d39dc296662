"""Per-group fits -> an Arrow table in the result-file contract, written atomically."""

from __future__ import annotations

import os
import secrets

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from ..engine.solve import GroupFits

__all__ = ["fits_table", "write_results", "STAT_COLUMNS", "TERM_FIELDS"]

TERM_FIELDS = ("estimate", "std_error", "t_value", "p_value", "ci_low", "ci_high")
STAT_COLUMNS = ("r_squared", "adj_r_squared", "residual_std_error", "df_residual",
                "f_statistic", "f_p_value", "condition_number")


def fits_table(keys: pa.Table, fits: GroupFits, *, skipped: np.ndarray,
               infinite: np.ndarray) -> pa.Table:
    """One row per group: keys, n_rows, status, per-term columns, fit statistics, extras.

    Rows are sorted by the key columns so files are comparable across runs.
    """
    cols: dict[str, pa.Array] = {name: keys.column(name) for name in keys.column_names}
    cols["n_rows"] = pa.array(fits.n_rows, pa.int64())
    cols["status"] = pa.array(list(fits.status), pa.string())
    for t, term in enumerate(fits.terms):
        for field in TERM_FIELDS:
            cols[f"{term}_{field}"] = pa.array(getattr(fits, field)[:, t], pa.float64())
    for stat in STAT_COLUMNS:
        typ = pa.int64() if stat == "df_residual" else pa.float64()
        cols[stat] = pa.array(getattr(fits, stat), typ)
    # what prediction needs to centre its variance (see engine.predict)
    features = fits.terms[1:] if fits.terms and fits.terms[0] == "intercept" else fits.terms
    for j, name in enumerate(features):
        cols[f"{name}_mean"] = pa.array(fits.feature_mean[:, j], pa.float64())
    cols["weight_sum"] = pa.array(fits.weight_sum, pa.float64())
    cols["n_skipped"] = pa.array(skipped, pa.int64())
    cols["n_infinite"] = pa.array(infinite, pa.int64())
    k = len(fits.terms)
    flat = pa.array(fits.covariance.reshape(-1), pa.float64())
    cols["covariance"] = pa.FixedSizeListArray.from_arrays(flat, k * k).cast(pa.list_(pa.float64()))
    table = pa.table(cols)
    if keys.num_columns and table.num_rows > 1:
        table = table.take(pc.sort_indices(table, sort_keys=[(n, "ascending") for n in keys.column_names]))
    return table


def write_results(table: pa.Table, path: str) -> None:
    """Write ``table`` to ``path`` atomically: a temp file in the same directory, then rename.

    A reader sees the old file or the new one, never a partial one; on failure no
    file is left behind.
    """
    directory = os.path.dirname(os.path.abspath(path))
    tmp = os.path.join(directory, f".trendmill-{secrets.token_hex(8)}.parquet.tmp")
    # created like any file (mode 0666 less the umask), not mkstemp's 0600
    os.close(os.open(tmp, os.O_CREAT | os.O_EXCL | os.O_WRONLY, 0o666))
    try:
        pq.write_table(table, tmp)
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise
