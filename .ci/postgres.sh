#!/usr/bin/env bash
# Start a throw-away PostgreSQL server for the database-facing tests and print the URL.
#
#   eval "$(bash .ci/postgres.sh)"     # sets AUDITOR_TEST_PG_URL
#
# Installs PostgreSQL from Debian's packages when no server binaries are present, creates a
# cluster in its own data directory (not the distribution's default cluster), listening on
# loopback only, starts it, and creates the test database. Idempotent: a second call finds the
# server running and only prints the URL again. Progress goes to stderr; stdout carries only
# the `export` lines meant for eval.
set -euo pipefail

PGPORT="${AUDITOR_PG_PORT:-55432}"
PGDATA="${AUDITOR_PG_DATA:-/tmp/auditor-pg/data}"
PGDB="${AUDITOR_PG_DB:-auditor_test}"
log() { echo "postgres.sh: $*" >&2; }

find_bindir() {
    local d
    for d in $(ls -d /usr/lib/postgresql/*/bin 2>/dev/null | sort -V -r); do
        if [ -x "$d/pg_ctl" ] && [ -x "$d/initdb" ]; then echo "$d"; return 0; fi
    done
    return 1
}

BINDIR="$(find_bindir || true)"
if [ -z "$BINDIR" ]; then
    if [ "$(id -u)" -ne 0 ]; then
        log "PostgreSQL is not installed and installing it needs root"; exit 1
    fi
    log "installing PostgreSQL from the Debian packages"
    export DEBIAN_FRONTEND=noninteractive
    apt-get update >&2
    apt-get install -y --no-install-recommends postgresql >&2
    BINDIR="$(find_bindir)"
fi

# The server refuses to run as root: run it as the postgres system user when we are root.
if [ "$(id -u)" -eq 0 ]; then
    id postgres >/dev/null 2>&1 || useradd --system --home-dir /var/lib/postgresql --shell /bin/bash postgres
    as_pg() { runuser -u postgres -- "$@"; }
    PGUSER=postgres
else
    as_pg() { "$@"; }
    PGUSER="$(id -un)"
fi

mkdir -p "$(dirname "$PGDATA")"
if [ "$(id -u)" -eq 0 ]; then chown postgres "$(dirname "$PGDATA")"; fi

if [ ! -s "$PGDATA/PG_VERSION" ]; then
    log "creating a cluster in $PGDATA ($BINDIR)"
    # trust on loopback only: a disposable test server with no password to leak
    as_pg "$BINDIR/initdb" -D "$PGDATA" -U "$PGUSER" --auth=trust --encoding=UTF8 --locale=C.UTF-8 >&2 \
        || as_pg "$BINDIR/initdb" -D "$PGDATA" -U "$PGUSER" --auth=trust --encoding=UTF8 --no-locale >&2
fi

if as_pg "$BINDIR/pg_ctl" -D "$PGDATA" status >/dev/null 2>&1; then
    log "server already running in $PGDATA"
else
    log "starting the server on 127.0.0.1:$PGPORT"
    as_pg "$BINDIR/pg_ctl" -D "$PGDATA" -l "$PGDATA/server.log" -w -t 60 \
        -o "-c listen_addresses=127.0.0.1 -p $PGPORT -k $PGDATA -c max_connections=200" start >&2
fi

for _ in $(seq 1 30); do
    "$BINDIR/pg_isready" -h 127.0.0.1 -p "$PGPORT" -q && break
    sleep 1
done
"$BINDIR/pg_isready" -h 127.0.0.1 -p "$PGPORT" -q || { log "server did not come up"; tail -20 "$PGDATA/server.log" >&2; exit 1; }

exists="$(as_pg "$BINDIR/psql" -h 127.0.0.1 -p "$PGPORT" -U "$PGUSER" -d postgres -tAc \
    "SELECT 1 FROM pg_database WHERE datname = '$PGDB'")"
if [ "$exists" != "1" ]; then
    log "creating database $PGDB"
    as_pg "$BINDIR/createdb" -h 127.0.0.1 -p "$PGPORT" -U "$PGUSER" "$PGDB"
fi

echo "export AUDITOR_TEST_PG_URL=postgresql+psycopg://$PGUSER@127.0.0.1:$PGPORT/$PGDB"
