#!/usr/bin/env bash
# Real servers for the gateway service tests (docs/gateway.md, "Tests"):
# installs Mosquitto and PostgreSQL when missing (Debian packages), starts a
# PostgreSQL cluster on a free loopback port under a temp dir (as a non-root
# user when run as root), exports where the tests find them, runs the
# service tests (or the command given: `.ci/services.sh bench`, or any
# command), and stops everything on exit. The tests start their own
# Mosquitto brokers (they restart them mid-stream) from ENVORD_TEST_MOSQUITTO.
# Nothing listens beyond 127.0.0.1.
set -euo pipefail
cd "$(dirname "$0")/.."

need=()
MOSQ=$(command -v mosquitto || true)
[ -n "$MOSQ" ] || { [ -x /usr/sbin/mosquitto ] && MOSQ=/usr/sbin/mosquitto; } || true
[ -n "$MOSQ" ] || need+=(mosquitto)
ls /usr/lib/postgresql/*/bin/initdb >/dev/null 2>&1 || need+=(postgresql)
# the TLS test makes its CA and broker certificate with the openssl command
command -v openssl >/dev/null || need+=(openssl)
if [ ${#need[@]} -gt 0 ]; then
  echo "installing ${need[*]}"
  apt-get update -qq
  DEBIAN_FRONTEND=noninteractive apt-get install -y -qq "${need[@]}" >/dev/null
  MOSQ=$(command -v mosquitto || echo /usr/sbin/mosquitto)
fi
[ -x "$MOSQ" ] || { echo "FAILED: mosquitto is not installed and could not be installed"; exit 1; }
command -v openssl >/dev/null || { echo "FAILED: openssl is not installed and could not be installed"; exit 1; }
PGBIN=$(ls -d /usr/lib/postgresql/*/bin | sort -V | tail -1)
[ -x "$PGBIN/initdb" ] || { echo "FAILED: PostgreSQL initdb not found under /usr/lib/postgresql"; exit 1; }

TMP=$(mktemp -d /tmp/envord-services.XXXXXX)
chmod 755 "$TMP"
RUNAS=()
if [ "$(id -u)" = 0 ]; then
  # PostgreSQL refuses to run as root: use the postgres system user.
  id -u postgres >/dev/null 2>&1 || useradd --system --no-create-home --shell /usr/sbin/nologin postgres
  RUNAS=(runuser -u postgres --)
  mkdir -p "$TMP/pg"; chown postgres "$TMP/pg"
else
  mkdir -p "$TMP/pg"
fi
free_port() { python3 -c 'import socket; s=socket.socket(); s.bind(("127.0.0.1", 0)); print(s.getsockname()[1])'; }
PGPORT=$(free_port)
PGDATA="$TMP/pg/data"
cleanup() {
  "${RUNAS[@]}" "$PGBIN/pg_ctl" -D "$PGDATA" -m immediate stop >/dev/null 2>&1 || true
  rm -rf "$TMP"
}
trap cleanup EXIT

"${RUNAS[@]}" "$PGBIN/initdb" -D "$PGDATA" -U envord --auth=trust -E UTF8 >"$TMP/initdb.log" 2>&1 \
  || { cat "$TMP/initdb.log"; echo "FAILED: initdb"; exit 1; }
"${RUNAS[@]}" "$PGBIN/pg_ctl" -D "$PGDATA" -l "$TMP/pg/log" -w -t 30 \
  -o "-c listen_addresses=127.0.0.1 -p $PGPORT -k $TMP/pg -c max_connections=50" start >/dev/null \
  || { cat "$TMP/pg/log"; echo "FAILED: PostgreSQL did not start"; exit 1; }

export ENVORD_TEST_MOSQUITTO="$MOSQ"
export ENVORD_TEST_PG_URL="postgres://envord@127.0.0.1:$PGPORT/postgres"
# How a test restarts the database mid-stream: "$ENVORD_TEST_PG_CTL restart".
export ENVORD_TEST_PG_CTL="${RUNAS[*]} $PGBIN/pg_ctl -D $PGDATA -w -t 30 -m fast"
echo "PostgreSQL $("$PGBIN/postgres" --version | awk '{print $3}') on 127.0.0.1:$PGPORT; $("$MOSQ" -h | head -1)"

case "${1:-tests}" in
  tests) cargo test -q -p host-sim --features service-tests --locked --test gateway_serve -- --test-threads=1 --nocapture ;;
  bench) cargo bench -q -p host-sim --features service-tests --locked --bench gateway_ingest ;;
  *) "$@" ;;
esac
