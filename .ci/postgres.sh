#!/usr/bin/env bash
# A throwaway PostgreSQL server for the store tests.
#
# Sourced:   source .ci/postgres.sh && pg_start      (pg_start = reconcile_pg_start)
#            exports RECONCILE_TEST_PG_URL (and RECONCILE_PG_DIR); stops the server on
#            EXIT unless the caller already has an EXIT trap, in which case that trap
#            must call pg_stop (= reconcile_pg_stop). Safe under set -euo pipefail.
# Called:    eval "$(bash .ci/postgres.sh start)"   prints the export lines, leaves it running
#            bash .ci/postgres.sh stop [DIR]          stops it (DIR defaults to $RECONCILE_PG_DIR)
#
# Finds the server binaries (Debian keeps them in /usr/lib/postgresql/VERSION/bin),
# installs the distribution's package with apt-get when they are absent, and runs the
# server as the `postgres` user when started as root (the server refuses to run as root),
# on 127.0.0.1 and a free port, with fsync off, its socket and data in a temporary folder.

reconcile_pg_log() { echo "postgres.sh: $*" >&2; }

# The newest server bin folder, or nothing. Always succeeds, so that a caller running
# under `set -euo pipefail` gets to the install step.
reconcile_pg_bindir() {
    local found="" d
    for d in $(ls -d "${RECONCILE_PG_LIBDIR:-/usr/lib/postgresql}"/*/bin 2>/dev/null | sort -V || true); do
        if [ -x "$d/initdb" ] && [ -x "$d/pg_ctl" ]; then found="$d"; fi
    done
    if [ -z "$found" ] && command -v dpkg >/dev/null 2>&1; then
        found=$(dpkg -L postgresql-15 2>/dev/null | grep 'bin/initdb$' | head -n 1 || true)
        if [ -n "$found" ]; then found=$(dirname "$found"); fi
    fi
    if [ -z "$found" ] && command -v initdb >/dev/null 2>&1 && command -v pg_ctl >/dev/null 2>&1; then
        found=$(dirname "$(command -v initdb)")
    fi
    echo "$found"
    return 0
}

reconcile_pg_install() {
    if [ "$(id -u)" != 0 ] || ! command -v apt-get >/dev/null 2>&1; then
        reconcile_pg_log "no PostgreSQL server binaries found, and cannot install them (need root and apt-get)"
        return 1
    fi
    reconcile_pg_log "installing the distribution's postgresql package"
    DEBIAN_FRONTEND=noninteractive apt-get update -qq >&2 &&
        DEBIAN_FRONTEND=noninteractive apt-get install -y -qq postgresql >&2
}

reconcile_pg_free_port() {
    python3 - <<'EOF' 2>/dev/null && return 0
import socket
s = socket.socket()
s.bind(("127.0.0.1", 0))
print(s.getsockname()[1])
s.close()
EOF
    local port
    for _ in $(seq 50); do
        port=$((20000 + RANDOM % 40000))
        if ! (exec 3<>"/dev/tcp/127.0.0.1/$port") 2>/dev/null; then echo "$port"; return 0; fi
    done
    return 1
}

# Start a server; on success exports RECONCILE_TEST_PG_URL and RECONCILE_PG_DIR.
reconcile_pg_start() {
    local bindir dir port db run attempt
    bindir=$(reconcile_pg_bindir)
    if [ -z "$bindir" ]; then
        reconcile_pg_install || return 1
        bindir=$(reconcile_pg_bindir)
        [ -n "$bindir" ] || { reconcile_pg_log "postgresql installed but initdb not found"; return 1; }
    fi
    run=()
    if [ "$(id -u)" = 0 ]; then
        id -u postgres >/dev/null 2>&1 || useradd -r postgres || return 1
        run=(runuser -u postgres --)
    fi
    dir=$(mktemp -d "${RECONCILE_PG_TMP:-/tmp}/reconcile-pg.XXXXXX") || return 1
    chmod 700 "$dir"
    if [ "$(id -u)" = 0 ]; then chown postgres: "$dir" || return 1; fi
    if ! "${run[@]}" "$bindir/initdb" -D "$dir/data" -U postgres -A trust --no-sync \
            -E UTF8 --locale=C >"$dir/initdb.log" 2>&1; then
        reconcile_pg_log "initdb failed:"; cat "$dir/initdb.log" >&2
        rm -rf "$dir"; return 1
    fi
    for attempt in 1 2 3 4 5; do
        port=$(reconcile_pg_free_port) || { reconcile_pg_log "no free port"; rm -rf "$dir"; return 1; }
        if "${run[@]}" "$bindir/pg_ctl" -D "$dir/data" -l "$dir/server.log" -w -t 30 \
                -o "-c listen_addresses=127.0.0.1 -p $port -c unix_socket_directories=$dir -c fsync=off -c synchronous_commit=off -c full_page_writes=off" \
                start >/dev/null 2>&1; then
            break
        fi
        reconcile_pg_log "start on port $port failed (attempt $attempt)"
        port=""
    done
    if [ -z "$port" ]; then
        cat "$dir/server.log" >&2 2>/dev/null; rm -rf "$dir"; return 1
    fi
    db=reconcile_test
    if ! "${run[@]}" "$bindir/createdb" -h 127.0.0.1 -p "$port" -U postgres "$db" >&2; then
        reconcile_pg_log "createdb failed"; RECONCILE_PG_DIR="$dir" reconcile_pg_stop; return 1
    fi
    export RECONCILE_PG_DIR="$dir"
    export RECONCILE_PG_BINDIR="$bindir"
    export RECONCILE_TEST_PG_URL="postgresql+psycopg://postgres@127.0.0.1:$port/$db"
    reconcile_pg_log "server $bindir on 127.0.0.1:$port, data in $dir"
    if [ "${BASH_SOURCE[0]}" != "$0" ] && [ -z "$(trap -p EXIT)" ]; then
        trap reconcile_pg_stop EXIT
    fi
    return 0
}

# Stop the server started by reconcile_pg_start (by the pid in its pid file), remove its folder.
reconcile_pg_stop() {
    local dir="${1:-${RECONCILE_PG_DIR:-}}" pid
    [ -n "$dir" ] && [ -d "$dir" ] || return 0
    if [ -f "$dir/data/postmaster.pid" ]; then
        pid=$(head -n 1 "$dir/data/postmaster.pid")
        if [ -n "$pid" ] && kill -0 "$pid" 2>/dev/null; then
            kill -INT "$pid" 2>/dev/null   # fast shutdown
            for _ in $(seq 100); do kill -0 "$pid" 2>/dev/null || break; sleep 0.1; done
            kill -0 "$pid" 2>/dev/null && kill -KILL "$pid" 2>/dev/null
        fi
    fi
    rm -rf "$dir"
    if [ "${RECONCILE_PG_DIR:-}" = "$dir" ]; then unset RECONCILE_PG_DIR RECONCILE_TEST_PG_URL; fi
    return 0
}

# Short names, as .ci/run calls them.
pg_start() { reconcile_pg_start "$@"; }
pg_stop() { reconcile_pg_stop "$@"; }

if [ "${BASH_SOURCE[0]}" = "$0" ]; then
    set -euo pipefail
    case "${1:-}" in
        start)
            reconcile_pg_start
            printf 'export RECONCILE_PG_DIR=%q\n' "$RECONCILE_PG_DIR"
            printf 'export RECONCILE_TEST_PG_URL=%q\n' "$RECONCILE_TEST_PG_URL"
            ;;
        stop) reconcile_pg_stop "${2:-}" ;;
        *) echo "usage: $0 start | stop [DIR]   (or source it and call reconcile_pg_start)" >&2; exit 2 ;;
    esac
fi
