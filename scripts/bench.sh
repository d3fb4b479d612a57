#!/usr/bin/env bash
# The million-unit benchmark: geofold against the raw COPY floor, in one run.
#
#   bash scripts/bench.sh [N_UNITS] [ROUNDS]      (defaults: 1000000 units, 3 rounds)
#
# Builds an N-polygon table in a throwaway PostGIS (or in $GEOFOLD_BENCH_DB when set),
# then, ROUNDS times, interleaved so machine drift hits both alike:
#   floor   = psql streaming id, geometry and the 5 numbers out with binary COPY to /dev/null
#           + psql loading N rows of (run id, unit id, fold, observed, predicted), taken from
#             geofold's own run, with binary COPY into an empty logged table;
#   geofold = `geofold run` (grid, 10 folds, OLS, 4 features) on the same table,
#             with its peak resident memory from GNU time.
#   and the same job from a GeoPackage copy of the table (written by ogr2ogr) into a new
#   results GeoPackage.
# Prints medians and the ratio geofold / floor; writes bench/last-run.txt.
set -euo pipefail
cd "$(dirname "$0")/.."
N=${1:-1000000}
ROUNDS=${2:-3}
here=$(pwd)
bash scripts/pg-throwaway.sh ensure-packages >&2
if [ -n "${GEOFOLD_BENCH_DB:-}" ]; then
  URI=$GEOFOLD_BENCH_DB
else
  PGDIR=$(mktemp -d /tmp/geofold-bench-pg.XXXXXX)
  trap 'bash scripts/pg-throwaway.sh stop "$PGDIR" >/dev/null 2>&1 || true; rm -rf "$WORK"' EXIT
  URI=$(bash scripts/pg-throwaway.sh start "$PGDIR")
fi
WORK=$(mktemp -d /tmp/geofold-bench.XXXXXX)
chmod 777 "$WORK"
trap 'rm -rf "$WORK"; [ -n "${PGDIR:-}" ] && bash scripts/pg-throwaway.sh stop "$PGDIR" >/dev/null 2>&1 || true' EXIT
cargo build --release --locked -q
BIN=$here/target/release/geofold
q() { PGOPTIONS="-c client_min_messages=warning" psql "$URI" -X -q -v ON_ERROR_STOP=1 "$@"; }

side=$(python3 -c "import math; print(math.ceil(math.sqrt($N)))")
echo "building bench.units: $N polygons (octagons on a ${side}-wide lattice), 4 features" >&2
q <<SQL
DROP SCHEMA IF EXISTS bench CASCADE;
DROP SCHEMA IF EXISTS bench_results CASCADE;
DROP SCHEMA IF EXISTS bench_floor CASCADE;
CREATE SCHEMA bench;
SELECT setseed(0.42);
CREATE TABLE bench.units AS
SELECT i AS id,
       ST_Multi(ST_Buffer(ST_SetSRID(ST_MakePoint(500000 + x * 100.0, 10000 + y * 100.0), 32631), 45, 2))::geometry(MultiPolygon, 32631) AS geom,
       sin(x / 40.0) + 0.1 * random() AS f1,
       cos(y / 55.0) + 0.1 * random() AS f2,
       random() AS f3,
       (x + y) / 1000.0 + 0.1 * random() AS f4,
       2 + 1.5 * sin(x / 40.0) - 0.8 * cos(y / 55.0) + 0.3 * sin((x + 2 * y) / 25.0) + 0.2 * random() AS target
FROM (SELECT i, i % $side AS x, i / $side AS y FROM generate_series(1, $N) i) g;
ALTER TABLE bench.units ADD PRIMARY KEY (id);
VACUUM ANALYZE bench.units;
SQL

run_geofold() {
  /usr/bin/time -f "%e %M" -o "$WORK/time.txt" "$BIN" -q run --db "$URI" --table bench.units --id id --geom geom \
    --target target --features f1,f2,f3,f4 --scheme grid --block-size 5000 --folds 10 \
    --results-schema bench_results --job bench --json > "$WORK/run.json"
  cat "$WORK/time.txt"
}

floor_read() {
  local start end
  start=$(date +%s.%N)
  q -c "\\copy (SELECT id::int8, geom, target::float8, f1::float8, f2::float8, f3::float8, f4::float8 FROM bench.units) TO '/dev/null' (FORMAT binary)"
  end=$(date +%s.%N)
  python3 -c "print(f'{$end - $start:.3f}')"
}

floor_write() {
  local start end
  q -c "DROP SCHEMA IF EXISTS bench_floor CASCADE; CREATE SCHEMA bench_floor;
        CREATE TABLE bench_floor.rows (run_id uuid, unit_id bigint, fold integer,
                                       observed double precision, predicted double precision);" >/dev/null
  start=$(date +%s.%N)
  q -c "\\copy bench_floor.rows FROM '$WORK/rows.copy' (FORMAT binary)"
  end=$(date +%s.%N)
  python3 -c "print(f'{$end - $start:.3f}')"
}

echo "warm-up run (also produces the result rows the floor loads)" >&2
run_geofold >/dev/null
RUN_ID=$(python3 -c "import json; print(json.load(open('$WORK/run.json'))['runs'][0]['run_id'])")
q -c "\\copy (SELECT run_id, unit_id::bigint, fold, observed, predicted FROM bench_results.held_out WHERE run_id = '$RUN_ID') TO '$WORK/rows.copy' (FORMAT binary)"
BYTES=$(q -At -c "SELECT pg_total_relation_size('bench_results.held_out') + pg_total_relation_size('bench_results.unit_summaries')")
floor_read >/dev/null

echo "GeoPackage: writing the same table with ogr2ogr" >&2
ogr2ogr -f GPKG "$WORK/bench.gpkg" "PG:$(python3 -c "
import urllib.parse as u
p = u.urlparse('$URI'); print(f'host={p.hostname} port={p.port} user={p.username} dbname={p.path[1:]}')")" \
  bench.units -nln units 2>&1 | grep -v '^$' >&2 || true

run_geofold_gpkg() {
  rm -f "$WORK/bench-results.gpkg"
  /usr/bin/time -f "%e %M" -o "$WORK/gtime.txt" "$BIN" -q run --gpkg "$WORK/bench.gpkg" --layer units --id id \
    --target target --features f1,f2,f3,f4 --scheme grid --block-size 5000 --folds 10 \
    --results-gpkg "$WORK/bench-results.gpkg" --job bench > /dev/null
  cat "$WORK/gtime.txt"
}
run_geofold_gpkg >/dev/null

reads=(); writes=(); runs=(); mems=(); gruns=(); gmems=()
for r in $(seq 1 "$ROUNDS"); do
  reads+=("$(floor_read)")
  writes+=("$(floor_write)")
  read -r secs kb < <(run_geofold)
  runs+=("$secs"); mems+=("$kb")
  read -r gsecs gkb < <(run_geofold_gpkg)
  gruns+=("$gsecs"); gmems+=("$gkb")
  echo "round $r: floor read ${reads[-1]} s + write ${writes[-1]} s; geofold $secs s, peak ${kb} KiB; from GeoPackage $gsecs s, peak ${gkb} KiB" >&2
done

python3 - "$N" "${reads[*]}" "${writes[*]}" "${runs[*]}" "${mems[*]}" "${gruns[*]:-}" "${gmems[*]:-}" "$BYTES" <<'PY' | tee bench/last-run.txt
import statistics as st, sys, platform, os, subprocess
n = int(sys.argv[1])
f = lambda s: [float(x) for x in s.split()] if s.strip() else []
reads, writes, runs, mems, gruns, gmems = (f(a) for a in sys.argv[2:8])
floor = [r + w for r, w in zip(reads, writes)]
ratio = [g / fl for g, fl in zip(runs, floor)]
cpu = next((l.split(':', 1)[1].strip() for l in open('/proc/cpuinfo') if l.startswith('model name')), '?')
print(f"units: {n}; rounds: {len(runs)}; machine: {os.cpu_count()} cores, {cpu}")
print(f"per-unit rows stored per run (held_out after the warm-up run, with its index): "
      f"{int(sys.argv[8]) / n:.1f} bytes per unit")
print(f"floor (binary COPY out of the source + binary COPY in of the per-unit rows), median: {st.median(floor):.2f} s "
      f"(read {st.median(reads):.2f} s + write {st.median(writes):.2f} s)")
print(f"geofold run (PostGIS, grid, 10 folds, OLS, 4 features), median: {st.median(runs):.2f} s; "
      f"peak memory {max(mems) / 1024:.0f} MiB")
print(f"ratio geofold / floor, per round: {', '.join(f'{r:.2f}' for r in ratio)}; median {st.median(ratio):.2f} (target <= 1.5)")
if gruns:
    print(f"geofold run (GeoPackage in and out), median: {st.median(gruns):.2f} s; peak memory {max(gmems) / 1024:.0f} MiB; "
          f"GeoPackage / PostGIS, per round: {', '.join(f'{g / p:.2f}' for g, p in zip(gruns, runs))}; "
          f"median {st.median([g / p for g, p in zip(gruns, runs)]):.2f} (target <= 1.0)")
PY
