#!/usr/bin/env bash
# pg-throwaway.sh — manage a disposable PostgreSQL 15 + PostGIS 3 cluster for
# geofold's tests, demo and benchmarks.
#
# Usage:
#   scripts/pg-throwaway.sh ensure-packages   install postgres/postgis/gdal/python3 if missing (root, Debian 12)
#   scripts/pg-throwaway.sh start DIR         init + start a cluster under DIR; prints ONE line:
#                                             postgresql://postgres@127.0.0.1:PORT/geofold_test
#   scripts/pg-throwaway.sh stop DIR          stop the cluster under DIR and remove DIR (never fails)
#
# Only the URI is written to stdout; all diagnostics go to stderr.
# The server listens on 127.0.0.1 only and uses trust authentication, with
# durability switched off (fsync=off etc.): it is for throwaway data only.
#
# Environment knobs (all optional):
#   PG_THROWAWAY_DB          database name to create (default geofold_test)
#   PG_THROWAWAY_EXTRA_OPTS  extra server options appended to pg_ctl -o, e.g. "-c max_connections=300"
#   PG_THROWAWAY_TLS=off     start without TLS (no certificate, ssl=off)
#   PG_THROWAWAY_SERVER_CERT, PG_THROWAWAY_SERVER_KEY
#                            PEM files to serve instead of a fresh self-signed certificate
#                            (e.g. one signed by a CA a test made); both or neither
#   PG_THROWAWAY_CLIENT_CA   PEM file of the CA(s) whose client certificates the server accepts
#                            (ssl_ca_file), for pg_hba.conf "cert" lines
#   PG_THROWAWAY_HBA         file of pg_hba.conf lines put before the default ones once the
#                            database is set up; the server then reloads. The default lines
#                            (trust on 127.0.0.1) still apply to roles the file does not match.
#
# The file can also be sourced; it then only defines functions (pgt_*).

PGT_BIN=/usr/lib/postgresql/15/bin
PGT_EXT_CONTROL=/usr/share/postgresql/15/extension/postgis.control
PGT_OS_USER=postgres
PGT_MARKER=.pg-throwaway

pgt_log() { printf 'pg-throwaway: %s\n' "$*" >&2; }
pgt_die() { pgt_log "error: $*"; exit 1; }

# Run a command as the postgres OS user when we are root (initdb/pg_ctl refuse
# root); as ourselves otherwise. The working directory is switched to / so that
# an unreadable cwd (e.g. /root/...) does not upset initdb or pg_ctl.
pgt_as_pg() {
    if [ "$(id -u)" -eq 0 ]; then
        (cd / && runuser -u "$PGT_OS_USER" -- "$@")
    else
        (cd / && "$@")
    fi
}

# ---------------------------------------------------------------- packages --

# Wait (up to ~15 min) while another apt/dpkg process is running, so that we do
# not fail on the dpkg/lists lock when a background install is in progress.
pgt_wait_for_apt() {
    local waited=0 busy p comm
    while :; do
        busy=
        for p in /proc/[0-9]*; do
            comm=$(cat "$p/comm" 2>/dev/null) || continue
            case "$comm" in
                apt|apt-get|dpkg|unattended-upgr) busy=$comm; break ;;
            esac
        done
        [ -z "$busy" ] && return 0
        if [ "$waited" -eq 0 ]; then
            pgt_log "another package manager process ($busy) is running; waiting for it to finish"
        fi
        if [ "$waited" -ge 900 ]; then
            pgt_log "still busy after ${waited}s; trying anyway"
            return 0
        fi
        sleep 5
        waited=$((waited + 5))
    done
}

pgt_apt_install() {
    # $@ = packages
    [ "$(id -u)" -eq 0 ] || pgt_die "need root to install: $* (or install them yourself)"
    command -v apt-get >/dev/null 2>&1 || pgt_die "apt-get not found; install manually: $*"
    pgt_wait_for_apt
    if [ -z "${PGT_APT_UPDATED:-}" ]; then
        pgt_log "apt-get update"
        local i
        for i in 1 2 3; do
            if DEBIAN_FRONTEND=noninteractive apt-get -o DPkg::Lock::Timeout=600 -qq update >&2; then
                PGT_APT_UPDATED=1
                break
            fi
            pgt_log "apt-get update failed (attempt $i); retrying"
            sleep 10
            pgt_wait_for_apt
        done
        [ -n "${PGT_APT_UPDATED:-}" ] || pgt_die "apt-get update failed"
    fi
    pgt_log "apt-get install -y $*"
    DEBIAN_FRONTEND=noninteractive apt-get -o DPkg::Lock::Timeout=600 install -y -q "$@" </dev/null >&2 \
        || pgt_die "apt-get install failed: $*"
}

pgt_ensure_packages() {
    if [ ! -x "$PGT_BIN/postgres" ] || [ ! -f "$PGT_EXT_CONTROL" ] || [ ! -x "$PGT_BIN/psql" ]; then
        pgt_apt_install postgresql-15 postgresql-15-postgis-3
        [ -x "$PGT_BIN/postgres" ] || pgt_die "$PGT_BIN/postgres still missing after install"
        [ -f "$PGT_EXT_CONTROL" ] || pgt_die "$PGT_EXT_CONTROL still missing after install"
    fi
    if ! command -v ogrinfo >/dev/null 2>&1; then
        pgt_apt_install gdal-bin
    fi
    if ! command -v python3 >/dev/null 2>&1; then
        pgt_apt_install python3 python3-venv
    fi
    # Headless Chromium opens the HTML reports in the report tests.
    if ! command -v chromium >/dev/null 2>&1; then
        pgt_apt_install chromium
    fi
}

# ------------------------------------------------------------------- start --

# Print a TCP port on 127.0.0.1 that is free right now.
pgt_free_port() {
    local port
    if command -v python3 >/dev/null 2>&1 && port=$(python3 - <<'PY' 2>/dev/null
import socket
s = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
s.bind(("127.0.0.1", 0))
print(s.getsockname()[1])
s.close()
PY
    ) && [ -n "$port" ]; then
        printf '%s\n' "$port"
        return 0
    fi
    # Fallback: probe upward from 55432 for a port nobody answers on.
    for port in $(seq 55432 56431); do
        if ! (exec 3<>"/dev/tcp/127.0.0.1/$port") 2>/dev/null; then
            printf '%s\n' "$port"
            return 0
        fi
    done
    return 1
}

pgt_psql() {
    # $1 = port, $2 = database, rest = psql args
    local port=$1 db=$2
    shift 2
    env -u PGSERVICE -u PGOPTIONS -u PGPASSWORD -u PGSSLMODE \
        "$PGT_BIN/psql" -X -q -v ON_ERROR_STOP=1 \
        -h 127.0.0.1 -p "$port" -U postgres -d "$db" "$@" </dev/null
}

pgt_start() {
    local dir=${1:-}
    local db=${PG_THROWAWAY_DB:-geofold_test}
    [ -n "$dir" ] || pgt_die "usage: $0 start DIR"
    case "$dir" in
        *[[:space:]\'\"\\\$\`]*) pgt_die "DIR must not contain whitespace, quotes, backslashes, \$ or backticks: $dir" ;;
    esac
    [ -x "$PGT_BIN/initdb" ] || pgt_die "$PGT_BIN/initdb not found (run: $0 ensure-packages)"
    [ -f "$PGT_EXT_CONTROL" ] || pgt_die "PostGIS not installed (run: $0 ensure-packages)"

    mkdir -p "$dir" || pgt_die "cannot create $dir"
    dir=$(cd "$dir" && pwd -P) || pgt_die "cannot resolve $dir"
    if [ -n "$(ls -A "$dir" 2>/dev/null)" ]; then
        pgt_die "$dir is not empty; pass a fresh directory (e.g. from mktemp -d)"
    fi
    # Unix socket path must fit in sun_path (107 bytes): DIR/.s.PGSQL.NNNNN
    if [ $(( ${#dir} + 18 )) -gt 107 ]; then
        pgt_die "path too long for a unix socket directory: $dir"
    fi
    : >"$dir/$PGT_MARKER"

    if [ "$(id -u)" -eq 0 ]; then
        id "$PGT_OS_USER" >/dev/null 2>&1 || pgt_die "OS user '$PGT_OS_USER' does not exist (is postgresql-15 installed?)"
        chown -R "$PGT_OS_USER:" "$dir" || pgt_die "chown $dir failed"
        chmod 0700 "$dir"
        if ! runuser -u "$PGT_OS_USER" -- test -w "$dir" 2>/dev/null; then
            pgt_die "user '$PGT_OS_USER' cannot write to $dir (is a parent directory private? use /tmp)"
        fi
    fi

    pgt_log "initdb in $dir/data"
    if ! pgt_as_pg "$PGT_BIN/initdb" -D "$dir/data" --auth=trust -U postgres \
            --encoding=UTF8 --locale=C --no-instructions >"$dir/initdb.log" 2>&1; then
        cat "$dir/initdb.log" >&2
        pgt_die "initdb failed"
    fi

    # A self-signed certificate so tests can check that sslmode=require encrypts.
    local ssl_opts=""
    if [ "${PG_THROWAWAY_TLS:-on}" = off ]; then
        pgt_log "TLS off (PG_THROWAWAY_TLS=off)"
    elif [ -n "${PG_THROWAWAY_SERVER_CERT:-}" ] || [ -n "${PG_THROWAWAY_SERVER_KEY:-}" ]; then
        [ -r "${PG_THROWAWAY_SERVER_CERT:-}" ] && [ -r "${PG_THROWAWAY_SERVER_KEY:-}" ] \
            || pgt_die "PG_THROWAWAY_SERVER_CERT and PG_THROWAWAY_SERVER_KEY must both name readable files"
        # Read as ourselves, written as the server's user, so its ownership is right.
        pgt_as_pg tee "$dir/data/server.crt" <"$PG_THROWAWAY_SERVER_CERT" >/dev/null \
            && pgt_as_pg tee "$dir/data/server.key" <"$PG_THROWAWAY_SERVER_KEY" >/dev/null \
            && pgt_as_pg chmod 0600 "$dir/data/server.key" \
            || pgt_die "cannot install the server certificate"
        ssl_opts="-c ssl=on"
    elif command -v openssl >/dev/null 2>&1 \
            && pgt_as_pg openssl req -new -x509 -nodes -days 2 -subj "/CN=localhost" \
                -keyout "$dir/data/server.key" -out "$dir/data/server.crt" >"$dir/openssl.log" 2>&1; then
        pgt_as_pg chmod 0600 "$dir/data/server.key"
        ssl_opts="-c ssl=on"
    else
        pgt_log "no certificate could be made (openssl missing or failed): TLS stays off"
    fi
    if [ -n "${PG_THROWAWAY_CLIENT_CA:-}" ] && [ -n "$ssl_opts" ]; then
        pgt_as_pg tee "$dir/data/client_ca.crt" <"$PG_THROWAWAY_CLIENT_CA" >/dev/null \
            || pgt_die "cannot install PG_THROWAWAY_CLIENT_CA"
        ssl_opts="$ssl_opts -c ssl_ca_file=client_ca.crt"
    fi

    local port attempt started=
    for attempt in 1 2 3 4 5; do
        port=$(pgt_free_port) || pgt_die "could not find a free TCP port on 127.0.0.1"
        pgt_log "starting postgres on 127.0.0.1:$port (attempt $attempt)"
        if pgt_as_pg "$PGT_BIN/pg_ctl" -w -t 120 -D "$dir/data" \
                -o "-c listen_addresses=127.0.0.1 -p $port -k $dir -c fsync=off -c synchronous_commit=off -c full_page_writes=off -c max_wal_size=4GB -c shared_buffers=512MB $ssl_opts ${PG_THROWAWAY_EXTRA_OPTS:-}" \
                -l "$dir/log" start >&2; then
            started=1
            break
        fi
        # Lost a race for the port? Try another one; otherwise give up.
        if grep -q 'could not bind\|Address already in use' "$dir/log" 2>/dev/null; then
            pgt_log "port $port was taken; retrying with another"
            continue
        fi
        break
    done
    if [ -z "$started" ]; then
        pgt_log "server failed to start; last lines of $dir/log:"
        tail -n 30 "$dir/log" >&2 2>/dev/null || true
        pgt_die "pg_ctl start failed"
    fi
    printf '%s\n' "$port" >"$dir/port"

    if ! pgt_psql "$port" postgres -c "CREATE DATABASE \"$db\"" >&2; then
        pgt_stop "$dir" >/dev/null 2>&1 || true
        pgt_die "CREATE DATABASE $db failed"
    fi
    if ! pgt_psql "$port" "$db" -c 'CREATE EXTENSION IF NOT EXISTS postgis' >&2; then
        pgt_stop "$dir" >/dev/null 2>&1 || true
        pgt_die "CREATE EXTENSION postgis failed"
    fi

    if [ -n "${PG_THROWAWAY_HBA:-}" ]; then
        if ! { cat "$PG_THROWAWAY_HBA" "$dir/data/pg_hba.conf" | pgt_as_pg tee "$dir/data/pg_hba.conf.new" >/dev/null \
                && pgt_as_pg mv "$dir/data/pg_hba.conf.new" "$dir/data/pg_hba.conf" \
                && pgt_psql "$port" postgres -c 'SELECT pg_reload_conf()' >/dev/null; }; then
            pgt_stop "$dir" >/dev/null 2>&1 || true
            pgt_die "installing PG_THROWAWAY_HBA failed"
        fi
        # The postmaster rereads the file on the signal; give it a moment.
        sleep 0.5
        pgt_log "pg_hba.conf: lines of $PG_THROWAWAY_HBA put first"
    fi

    local uri="postgresql://postgres@127.0.0.1:$port/$db"
    printf '%s\n' "$uri" >"$dir/uri"
    pgt_log "ready: $uri (data in $dir/data, log in $dir/log)"
    printf '%s\n' "$uri"
}

# -------------------------------------------------------------------- stop --

# True if $1 is a live (non-zombie) postgres process; if $2 is given, it must
# also have been started on that data directory (guards against pid reuse).
pgt_pid_is_postgres() {
    local pid=$1 datadir=${2:-} comm stat cmdline
    case "$pid" in ''|*[!0-9]*) return 1 ;; esac
    [ -d "/proc/$pid" ] || return 1
    comm=$(cat "/proc/$pid/comm" 2>/dev/null) || return 1
    case "$comm" in postgres|postmaster) ;; *) return 1 ;; esac
    # Field 3 of /proc/PID/stat is the state; Z (zombie) / X (dead) count as gone.
    stat=$(cat "/proc/$pid/stat" 2>/dev/null) || return 1
    stat=${stat##*) }
    case "${stat%% *}" in Z|X) return 1 ;; esac
    if [ -n "$datadir" ]; then
        cmdline=$(tr '\0' ' ' <"/proc/$pid/cmdline" 2>/dev/null) || return 1
        case "$cmdline" in *"$datadir"*) ;; *) return 1 ;; esac
    fi
    return 0
}

# Wait up to $3 tenths of a second for postgres pid $1 (data dir $2) to exit;
# true if it did.
pgt_wait_pid_gone() {
    local pid=$1 datadir=$2 n=$3 i
    for ((i = 0; i < n; i++)); do
        pgt_pid_is_postgres "$pid" "$datadir" || return 0
        sleep 0.1
    done
    ! pgt_pid_is_postgres "$pid" "$datadir"
}

pgt_stop() {
    local dir=${1:-}
    [ -n "$dir" ] || { pgt_log "usage: $0 stop DIR"; return 0; }
    [ -e "$dir" ] || return 0
    dir=$(cd "$dir" 2>/dev/null && pwd -P) || { pgt_log "cannot enter $1; leaving it"; return 0; }
    case "$dir" in
        /|/root|/home|/tmp|/var|/usr|/etc|/work) pgt_log "refusing to touch $dir"; return 0 ;;
    esac

    local pidfile="$dir/data/postmaster.pid" pid=
    if [ -f "$pidfile" ]; then
        pid=$(head -n 1 "$pidfile" 2>/dev/null || true)
        pgt_log "stopping postgres in $dir/data"
        pgt_as_pg "$PGT_BIN/pg_ctl" -D "$dir/data" -m fast -w -t 60 stop >&2 2>/dev/null || true
        # pg_ctl returns once the pid file is gone; the postmaster may need a
        # moment more to exit.
        if ! pgt_wait_pid_gone "$pid" "$dir/data" 100; then
            pgt_log "fast stop did not finish; trying immediate stop"
            pgt_as_pg "$PGT_BIN/pg_ctl" -D "$dir/data" -m immediate -w -t 30 stop >&2 2>/dev/null || true
            if ! pgt_wait_pid_gone "$pid" "$dir/data" 50; then
                pgt_log "postmaster $pid still alive; sending SIGKILL"
                kill -KILL "$pid" 2>/dev/null || true
                pgt_wait_pid_gone "$pid" "$dir/data" 50 || pgt_log "postmaster $pid did not exit"
            fi
        fi
    fi

    if [ -f "$dir/$PGT_MARKER" ] || [ -z "$(ls -A "$dir" 2>/dev/null)" ]; then
        rm -rf -- "$dir" || pgt_log "could not remove $dir"
    else
        pgt_log "$dir was not created by pg-throwaway.sh start; not removing it"
    fi
    return 0
}

# -------------------------------------------------------------------- main --

pgt_main() {
    local cmd=${1:-}
    shift || true
    case "$cmd" in
        ensure-packages) pgt_ensure_packages ;;
        start) pgt_start "$@" ;;
        stop) pgt_stop "$@" ;;
        -h|--help|help)
            sed -n '2,30p' "${BASH_SOURCE[0]}" | sed 's/^# \{0,1\}//' >&2 ;;
        *)
            pgt_log "usage: $0 {ensure-packages | start DIR | stop DIR}"
            return 2 ;;
    esac
}

if [ "${BASH_SOURCE[0]}" = "$0" ]; then
    set -uo pipefail
    pgt_main "$@"
fi
