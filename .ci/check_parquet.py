"""Checks a campaign's Parquet tables with DuckDB against their CSV twins: the same row count and
column names, the expected column types, and the same sum of a numeric column.

usage: check_parquet.py RESULTS_FOLDER PLATES [screen]

With `screen`, the campaign is one of screening plates and only its compounds table is checked.
"""

import math
import sys

import duckdb

folder, plates = sys.argv[1], int(sys.argv[2])
connection = duckdb.connect()

# table -> (column summed, {column: DuckDB type the Parquet file must give it})
EXPECTED = {
    "wells": (
        "rate [uM/s]",
        {
            "plate": "VARCHAR",
            "day": "VARCHAR",
            "operator": "VARCHAR",
            "well": "VARCHAR",
            "substrate [uM]": "DOUBLE",
            "rate [uM/s]": "DOUBLE",
            "n_points": "UINTEGER",
            "used": "BOOLEAN",
        },
    ),
    "conditions": ("n", {"plate": "VARCHAR", "lot": "VARCHAR", "n": "UINTEGER", "cv": "DOUBLE"}),
    "fits": (
        "value",
        {"plate": "VARCHAR", "parameter": "VARCHAR", "value": "DOUBLE", "ci95_low": "DOUBLE", "determined": "BOOLEAN"},
    ),
}

# A screening campaign's combined compounds table (the per-plate compounds.csv rows).
SCREEN_EXPECTED = {
    "compounds": (
        "n_points",
        {
            "plate": "VARCHAR",
            "compound": "VARCHAR",
            "IC50 [uM]": "DOUBLE",
            "IC50_qualifier": "VARCHAR",
            "hill": "DOUBLE",
            "n_points": "UINTEGER",
        },
    ),
}
if sys.argv[3:] == ["screen"]:
    EXPECTED = SCREEN_EXPECTED

failures = []
for table, (summed, types) in EXPECTED.items():
    parquet = f"read_parquet('{folder}/{table}.parquet')"
    csv = f"read_csv('{folder}/{table}.csv', header = true)"
    parquet_rows = connection.execute(f"select count(*) from {parquet}").fetchone()[0]
    csv_rows = connection.execute(f"select count(*) from {csv}").fetchone()[0]
    if parquet_rows != csv_rows or parquet_rows == 0:
        failures.append(f"{table}: {parquet_rows} Parquet rows, {csv_rows} CSV rows")
    described = {row[0]: row[1] for row in connection.execute(f"describe select * from {parquet}").fetchall()}
    csv_columns = [row[0] for row in connection.execute(f"describe select * from {csv}").fetchall()]
    if list(described) != csv_columns:
        failures.append(f"{table}: columns differ: {list(described)} vs {csv_columns}")
    for column, expected in types.items():
        if described.get(column) != expected:
            failures.append(f"{table}.{column}: type {described.get(column)}, expected {expected}")
    plates_seen = connection.execute(f"select count(distinct plate) from {parquet}").fetchone()[0]
    if plates_seen != plates:
        failures.append(f"{table}: {plates_seen} plates, expected {plates}")
    parquet_sum = connection.execute(f'select sum("{summed}") from {parquet}').fetchone()[0]
    csv_sum = connection.execute(f'select sum("{summed}") from {csv}').fetchone()[0]
    if not math.isclose(float(parquet_sum), float(csv_sum), rel_tol=1e-9):
        failures.append(f"{table}: sum of {summed} is {parquet_sum} in Parquet, {csv_sum} in CSV")
    print(f"ok: {table}: {parquet_rows} rows, sum of {summed} {parquet_sum:.6g} in both")

if failures:
    print("\n".join(failures), file=sys.stderr)
    sys.exit(1)
