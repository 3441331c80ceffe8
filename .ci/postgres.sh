#!/usr/bin/env bash
# Start a throwaway PostgreSQL cluster for the tests and export RUNDASH_TEST_PG_URL.
# Source it (". .ci/postgres.sh"): the cluster lives in a temp folder owned by the
# 'postgres' user, listens only on 127.0.0.1 on a free port, trusts loopback
# connections, and is stopped (and its folder removed) when the sourcing shell exits.
# The tests do not need it (they start a cluster of their own when RUNDASH_TEST_PG_URL is
# unset); it serves commands that want a server by URL, such as benchmarks/bench_sync.py.
if ! ls /usr/lib/postgresql/*/bin/initdb >/dev/null 2>&1; then
  echo "== installing postgresql (storage tests on PostgreSQL)"
  apt-get update -qq
  apt-get install -y -qq postgresql >/dev/null
fi
PG_BIN="$(dirname "$(ls -d /usr/lib/postgresql/*/bin/initdb | sort -V | tail -1)")"
RUNDASH_PG_DIR="$(mktemp -d /tmp/rundash-pg.XXXXXX)"
chown postgres: "$RUNDASH_PG_DIR"
chmod 700 "$RUNDASH_PG_DIR"
RUNDASH_PG_PORT="$(python - <<'PY'
import socket
s = socket.socket()
s.bind(("127.0.0.1", 0))
print(s.getsockname()[1])
s.close()
PY
)"
as_pg() { runuser -u postgres -- "$@"; }
as_pg "$PG_BIN/initdb" -D "$RUNDASH_PG_DIR/data" -U postgres -A trust -E UTF8 \
  --locale=C.UTF-8 >/dev/null
as_pg "$PG_BIN/pg_ctl" -D "$RUNDASH_PG_DIR/data" -l "$RUNDASH_PG_DIR/log" -w -t 60 \
  -o "-c listen_addresses=127.0.0.1 -p $RUNDASH_PG_PORT -k $RUNDASH_PG_DIR -c fsync=off \
-c synchronous_commit=off -c full_page_writes=off -c max_connections=200" start >/dev/null
as_pg "$PG_BIN/createdb" -h 127.0.0.1 -p "$RUNDASH_PG_PORT" -U postgres rundash_test
export RUNDASH_TEST_PG_URL="postgresql+psycopg://postgres@127.0.0.1:$RUNDASH_PG_PORT/rundash_test"
export RUNDASH_PG_DIR RUNDASH_PG_PORT PG_BIN
rundash_pg_stop() {
  runuser -u postgres -- "$PG_BIN/pg_ctl" -D "$RUNDASH_PG_DIR/data" -m immediate stop \
    >/dev/null 2>&1 || true
  rm -rf "$RUNDASH_PG_DIR"
}
trap rundash_pg_stop EXIT
echo "== postgresql $("$PG_BIN/postgres" --version | awk '{print $3}') on 127.0.0.1:$RUNDASH_PG_PORT"
