#!/usr/bin/env bash
# `loadtrim store bench --postgresql` on the test server (tests/support/pg_server.sh): it runs on both engines,
# reports the four-writer figures, and leaves nothing on the server (its scratch schemas are dropped). It
# asserts no timing (docs/performance.md holds the figures).
#   store_bench_pg.sh LOADTRIM PG_STATE_DIR
set -euo pipefail
loadtrim="$1"
state="$2"
conninfo="$(cat "$state/conninfo")"
psql="$(cat "$state/bindir")/psql"
out="$(timeout 300 "$loadtrim" store bench --sessions 200 --postgresql "$conninfo")"
printf '%s\n' "$out"
fail() { echo "FAIL: $*" >&2; exit 1; }
grep -q '^sqlite: indexing' <<<"$out" || fail "no SQLite figures"
grep -q '^postgresql: indexing' <<<"$out" || fail "no PostgreSQL figures"
[ "$(grep -c 'four cells at once: p95' <<<"$out")" -eq 2 ] || fail "the four-writer figures are not there for both engines"
grep -q '^store bench completed$' <<<"$out" || fail "the bench did not complete"
left="$(timeout 30 "$psql" "$conninfo" -Atc "SELECT count(*) FROM pg_namespace WHERE nspname LIKE 'loadtrim\\_bench\\_%'")"
[ "$left" = 0 ] || fail "$left scratch schema(s) left on the server"
# Ctrl-C while the bench writes to the server: exit 4 (interrupted, the README's table) and, again, nothing left.
log="$(mktemp)"
timeout 300 "$loadtrim" store bench --sessions 5000 --postgresql "$conninfo" >"$log" 2>&1 &
pid=$!
for _ in $(seq 1 1200); do
  grep -q '^PostgreSQL server' "$log" && break
  sleep 0.1
done
grep -q '^PostgreSQL server' "$log" || { cat "$log"; kill "$pid"; fail "the bench never reached the server"; }
sleep 1
kill -INT "$pid"
rc=0
wait "$pid" || rc=$?
cat "$log"
rm -f "$log"
[ "$rc" = 4 ] || fail "Ctrl-C during the bench exited $rc, not 4"
left="$(timeout 30 "$psql" "$conninfo" -Atc "SELECT count(*) FROM pg_namespace WHERE nspname LIKE 'loadtrim\\_bench\\_%'")"
[ "$left" = 0 ] || fail "$left scratch schema(s) left on the server after Ctrl-C"
echo "store_bench_pg: both engines measured, no scratch schema left, also after Ctrl-C"
