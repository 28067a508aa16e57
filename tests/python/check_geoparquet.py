#!/usr/bin/env python3
"""Check that every Parquet file under a folder opens unaided in pyarrow, geopandas and DuckDB.

Usage:
    python3 tests/python/check_geoparquet.py DIR [--expect-rows NAME=N ...]

For every ``*.parquet`` file under DIR (recursively, sorted):

* pyarrow reads it; the row count in the footer matches the rows read.
* If it carries GeoParquet ``geo`` metadata:
  - ``geo`` is present in BOTH the Parquet key/value metadata and the embedded Arrow schema
    (``ARROW:schema``), with the same text;
  - the JSON is well formed: version 1.x, ``primary_column`` listed in ``columns``, each
    geometry column binary with encoding ``WKB``, ``geometry_types`` a list, ``bbox`` (when
    present) four numbers with min <= max;
  - geopandas recognises the primary geometry column, and its CRS equals what the metadata
    says: ``crs`` missing -> OGC:CRS84, ``crs: null`` -> None, PROJJSON with an EPSG id -> that
    EPSG code, other PROJJSON -> the same CRS; geometry types found are among
    ``geometry_types``; the data's bounds equal ``bbox``;
  - DuckDB ``read_parquet`` accepts the file and sees the geometry column as GEOMETRY. When it
    shows a plain BLOB instead, that is accepted only if DuckDB's spatial extension cannot be
    loaded offline (nothing is downloaded), and the BLOB column must be readable.
* Files without ``geo`` are read by DuckDB too (row count compared).
* Leftover temporary files (``.NAME.parquet.tmp-*``) are failures: writes must be atomic.

``--expect-rows NAME=N`` (repeatable): every file whose relative path, file name or stem is
NAME must have N rows, and at least one file must match.

Prints one line per file (``OK`` or ``FAIL``), then a summary line. Exit status: 0 when every
check passed, 1 on any failure (or when no Parquet file is found), 2 on bad usage or a missing
Python package (``pip install pyarrow geopandas duckdb``).
"""

from __future__ import annotations

import argparse
import base64
import json
import math
import sys
from pathlib import Path

try:
    import duckdb
    import geopandas
    import pyarrow as pa
    import pyarrow.parquet as pq
    import pyproj
except ImportError as error:  # pragma: no cover - depends on the machine
    print(
        f"missing Python package ({error.name}); run: pip install pyarrow geopandas duckdb",
        file=sys.stderr,
    )
    sys.exit(2)


def parse_expectations(items: list[str]) -> dict[str, int]:
    """``["nodes=12", ...]`` -> ``{"nodes": 12}``; raises ValueError on a malformed item."""
    expectations: dict[str, int] = {}
    for item in items:
        name, sep, count = item.rpartition("=")
        if not sep or not name or not count.isdigit():
            raise ValueError(f"--expect-rows wants NAME=N, got {item!r}")
        expectations[name] = int(count)
    return expectations


def matches(name: str, rel_path: Path) -> bool:
    return name in (rel_path.as_posix(), rel_path.name, rel_path.stem)


def embedded_arrow_schema_metadata(key_values: dict[bytes, bytes]) -> dict[bytes, bytes] | None:
    """Metadata of the Arrow schema stored under ``ARROW:schema``; None when there is none."""
    encoded = key_values.get(b"ARROW:schema")
    if encoded is None:
        return None
    schema = pa.ipc.read_schema(pa.py_buffer(base64.b64decode(encoded)))
    return dict(schema.metadata or {})


def describe_crs(column_meta: dict) -> str:
    if "crs" not in column_meta:
        return "OGC:CRS84(default)"
    crs = column_meta["crs"]
    if crs is None:
        return "null"
    if isinstance(crs, dict):
        ident = crs.get("id") or {}
        if ident.get("authority") and ident.get("code") is not None:
            return f"{ident['authority']}:{ident['code']}"
        return f"PROJJSON({crs.get('name', '?')})"
    return f"invalid({crs!r})"


def check_crs(column_meta: dict, found: pyproj.CRS | None) -> str | None:
    """None when geopandas' CRS equals the metadata's; otherwise the problem."""
    if "crs" not in column_meta:
        if found is None or found != pyproj.CRS("OGC:CRS84"):
            return f"geopandas CRS is {found}, expected OGC:CRS84 (crs key omitted)"
        return None
    crs = column_meta["crs"]
    if crs is None:
        if found is not None:
            return f"geopandas CRS is {found.to_string()}, expected None (crs: null)"
        return None
    if not isinstance(crs, dict):
        return f"crs must be a PROJJSON object or null, got {type(crs).__name__}"
    if found is None:
        return "geopandas found no CRS although the metadata gives one"
    ident = crs.get("id") or {}
    if ident.get("authority") == "EPSG":
        code = found.to_epsg()
        if code is None or str(code) != str(ident.get("code")):
            return f"geopandas CRS identifies as EPSG:{code}, metadata says EPSG:{ident.get('code')}"
        return None
    expected = pyproj.CRS.from_json_dict(crs)
    if found != expected:
        return f"geopandas CRS {found.name!r} differs from the metadata's {expected.name!r}"
    return None


def check_geo_json(geo: dict, schema: pa.Schema) -> list[str]:
    problems = []
    version = str(geo.get("version", ""))
    if not version.startswith("1."):
        problems.append(f"geo version is {version!r}, expected 1.x")
    columns = geo.get("columns")
    if not isinstance(columns, dict) or not columns:
        return problems + ["geo has no columns"]
    primary = geo.get("primary_column")
    if primary not in columns:
        problems.append(f"primary_column {primary!r} not among geo columns {list(columns)}")
    for name, meta in columns.items():
        if name not in schema.names:
            problems.append(f"geo column {name!r} is not in the file")
            continue
        field_type = schema.field(name).type
        if not (pa.types.is_binary(field_type) or pa.types.is_large_binary(field_type)):
            problems.append(f"geo column {name!r} has type {field_type}, expected binary")
        if meta.get("encoding") != "WKB":
            problems.append(f"{name}: encoding is {meta.get('encoding')!r}, expected 'WKB'")
        if not isinstance(meta.get("geometry_types"), list):
            problems.append(f"{name}: geometry_types must be a list")
        bbox = meta.get("bbox")
        if bbox is not None:
            if not (isinstance(bbox, list) and len(bbox) == 4 and all(isinstance(v, (int, float)) for v in bbox)):
                problems.append(f"{name}: bbox must be 4 numbers, got {bbox!r}")
            elif bbox[0] > bbox[2] or bbox[1] > bbox[3]:
                problems.append(f"{name}: bbox {bbox} has min > max")
    return problems


def check_geopandas(path: Path, geo: dict, n_rows: int) -> list[str]:
    problems = []
    primary = geo.get("primary_column")
    meta = (geo.get("columns") or {}).get(primary, {})
    try:
        frame = geopandas.read_parquet(path)
    except Exception as error:  # noqa: BLE001 - any failure to read is the finding
        return [f"geopandas cannot read it: {error}"]
    if len(frame) != n_rows:
        problems.append(f"geopandas read {len(frame)} rows, pyarrow {n_rows}")
    if frame.geometry.name != primary:
        problems.append(f"geopandas geometry column is {frame.geometry.name!r}, expected {primary!r}")
    crs_problem = check_crs(meta, frame.crs)
    if crs_problem:
        problems.append(crs_problem)
    geometries = frame.geometry[frame.geometry.notna() & ~frame.geometry.is_empty]
    declared = set(meta.get("geometry_types") or [])
    found_types = set(geometries.geom_type.unique())
    if declared and not found_types <= declared:
        problems.append(f"geometry types {sorted(found_types)} not among declared {sorted(declared)}")
    bbox = meta.get("bbox")
    if bbox is not None and len(geometries) > 0:
        bounds = [float(v) for v in geometries.total_bounds]
        if not all(math.isclose(a, b, rel_tol=1e-12, abs_tol=1e-9) for a, b in zip(bounds, bbox)):
            problems.append(f"bbox {bbox} differs from the data's bounds {bounds}")
    if bbox is not None and len(geometries) == 0:
        problems.append(f"bbox {bbox} given but the column holds no geometry")
    return problems


def check_duckdb(
    con: duckdb.DuckDBPyConnection, path: Path, n_rows: int, geo: dict | None,
    n_geometries: int | None, spatial_loaded: bool,
) -> tuple[list[str], str]:
    """Problems found and a short label of how DuckDB saw the geometry."""
    source = "read_parquet(?, hive_partitioning = false)"
    try:
        (count,) = con.execute(f"SELECT count(*) FROM {source}", [str(path)]).fetchone()
    except Exception as error:  # noqa: BLE001
        return [f"DuckDB cannot read it: {error}"], "unreadable"
    problems = [] if count == n_rows else [f"DuckDB counts {count} rows, pyarrow {n_rows}"]
    if geo is None:
        return problems, "ok"
    primary = geo.get("primary_column")
    described = con.execute(f"DESCRIBE SELECT * FROM {source}", [str(path)]).fetchall()
    column_types = {row[0]: str(row[1]) for row in described}
    column_type = column_types.get(primary)
    if column_type is None:
        return problems + [f"DuckDB does not see column {primary!r}"], "missing"
    quoted = '"' + primary.replace('"', '""') + '"'
    if column_type.upper().startswith("GEOMETRY"):
        label = "GEOMETRY"
        (n_non_null,) = con.execute(f"SELECT count({quoted}) FROM {source}", [str(path)]).fetchone()
        if n_geometries is not None and n_non_null != n_geometries:
            problems.append(f"DuckDB sees {n_non_null} geometries, pyarrow {n_geometries}")
        try:
            rows = con.execute(
                f"SELECT DISTINCT ST_GeometryType({quoted})::VARCHAR FROM {source} "
                f"WHERE {quoted} IS NOT NULL",
                [str(path)],
            ).fetchall()
        except Exception:  # noqa: BLE001 - function missing in this DuckDB build
            rows = None
        if rows is not None:
            declared = {t.upper().replace(" ", "") for t in (geo["columns"][primary].get("geometry_types") or [])}
            found = {str(row[0]).upper().replace(" ", "") for row in rows}
            if declared and not found <= declared:
                problems.append(f"DuckDB geometry types {sorted(found)} not among {sorted(declared)}")
        return problems, label
    if column_type.upper() == "BLOB":
        if spatial_loaded:
            problems.append("DuckDB (spatial loaded) sees a plain BLOB: the geo metadata was not recognised")
            return problems, "BLOB"
        (n_non_null,) = con.execute(
            f"SELECT count({quoted}) FROM {source} WHERE octet_length({quoted}) >= 9", [str(path)]
        ).fetchone()
        if n_geometries is not None and n_non_null != n_geometries:
            problems.append(f"DuckDB reads {n_non_null} WKB blobs, pyarrow {n_geometries}")
        return problems, "BLOB(no spatial)"
    return problems + [f"DuckDB sees {primary!r} as {column_type}, expected GEOMETRY or BLOB"], column_type


def check_file(
    path: Path, root: Path, con: duckdb.DuckDBPyConnection, spatial_loaded: bool,
    expectations: dict[str, int], matched: set[str],
) -> tuple[bool, str]:
    rel_path = path.relative_to(root)
    problems: list[str] = []
    details: list[str] = []
    try:
        parquet_meta = pq.read_metadata(path)
        table = pq.ParquetFile(path).read()
    except Exception as error:  # noqa: BLE001
        return False, f"FAIL {rel_path}: pyarrow cannot read it: {' '.join(str(error).split())}"
    n_rows = table.num_rows
    details.append(f"rows={n_rows}")
    if parquet_meta.num_rows != n_rows:
        problems.append(f"footer says {parquet_meta.num_rows} rows, read {n_rows}")
    for name, expected in expectations.items():
        if matches(name, rel_path):
            matched.add(name)
            if n_rows != expected:
                problems.append(f"expected {expected} rows ({name}), found {n_rows}")

    key_values = dict(parquet_meta.metadata or {})
    geo_kv = key_values.get(b"geo")
    try:
        arrow_meta = embedded_arrow_schema_metadata(key_values)
    except Exception as error:  # noqa: BLE001
        arrow_meta = None
        problems.append(f"ARROW:schema cannot be decoded: {error}")
    geo_arrow = (arrow_meta or {}).get(b"geo")
    geo = None
    n_geometries = None
    if geo_kv is not None or geo_arrow is not None:
        if geo_kv is None:
            problems.append("geo only in the Arrow schema, not in the Parquet key/value metadata")
        elif arrow_meta is not None and geo_arrow is None:
            problems.append("geo only in the Parquet key/value metadata, not in the Arrow schema")
        elif geo_arrow is not None and geo_arrow != geo_kv:
            problems.append("geo differs between the Parquet key/value metadata and the Arrow schema")
        try:
            geo = json.loads(geo_kv if geo_kv is not None else geo_arrow)
        except ValueError as error:
            problems.append(f"geo is not JSON: {error}")
        if geo is not None and not isinstance(geo, dict):
            problems.append("geo is not a JSON object")
            geo = None
    if geo is not None:
        json_problems = check_geo_json(geo, table.schema)
        problems += json_problems
        primary = geo.get("primary_column")
        if not json_problems:
            meta = geo["columns"][primary]
            details.append(f"geo={primary}:{'/'.join(meta.get('geometry_types') or ['?'])}")
            details.append(f"crs={describe_crs(meta)}")
            details.append("bbox=yes" if "bbox" in meta else "bbox=none")
            n_geometries = n_rows - table.column(primary).null_count
            problems += check_geopandas(path, geo, n_rows)
        else:
            geo = None
    else:
        details.append("geo=none")
    duckdb_problems, duckdb_label = check_duckdb(con, path, n_rows, geo, n_geometries, spatial_loaded)
    problems += duckdb_problems
    details.append(f"duckdb={duckdb_label}")
    if problems:
        # One line per file: fold multi-line messages (DuckDB's carry the SQL).
        return False, f"FAIL {rel_path}: " + "; ".join(" ".join(p.split()) for p in problems)
    return True, f"OK   {rel_path} " + " ".join(details)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(
        description="Check Parquet/GeoParquet files with pyarrow, geopandas and DuckDB."
    )
    parser.add_argument("directory", type=Path, help="folder searched recursively for *.parquet")
    parser.add_argument(
        "--expect-rows", action="append", default=[], metavar="NAME=N",
        help="files whose relative path, name or stem is NAME must have N rows (repeatable)",
    )
    args = parser.parse_args(argv)
    try:
        expectations = parse_expectations(args.expect_rows)
    except ValueError as error:
        parser.error(str(error))
    root: Path = args.directory
    if not root.is_dir():
        parser.error(f"{root}: not a folder")

    con = duckdb.connect()
    try:
        con.execute("LOAD spatial")  # offline only: never INSTALL
        spatial_loaded = True
    except Exception:  # noqa: BLE001
        spatial_loaded = False

    n_failed = 0
    for leftover in sorted(root.rglob(".*.tmp-*")):
        print(f"FAIL {leftover.relative_to(root)}: leftover temporary file (write was not atomic)")
        n_failed += 1
    files = sorted(p for p in root.rglob("*.parquet") if p.is_file())
    matched: set[str] = set()
    for path in files:
        passed, line = check_file(path, root, con, spatial_loaded, expectations, matched)
        print(line, flush=True)
        n_failed += 0 if passed else 1
    for name in sorted(set(expectations) - matched):
        print(f"FAIL --expect-rows {name}={expectations[name]}: no file named {name}")
        n_failed += 1
    if not files:
        print(f"FAIL {root}: no *.parquet file found")
        n_failed += 1
    print(
        f"checked {len(files)} Parquet files: {n_failed} failure(s); "
        f"DuckDB {duckdb.__version__}, spatial extension {'loaded' if spatial_loaded else 'not available'}"
    )
    return 1 if n_failed else 0


if __name__ == "__main__":
    sys.exit(main())
