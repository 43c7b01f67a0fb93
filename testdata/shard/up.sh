#!/usr/bin/env bash
# Starts the two local shard clusters of the sharded-warehouse tests
# (warehouse/postgres/shardtest): Debian PostgreSQL clusters cpshard1 and
# cpshard2 on 127.0.0.1:5441 and :5442, trust authentication, each with a
# database named shard; and the main cluster on 127.0.0.1:5432, which the
# tests use as the coordinator, when it is down. Safe to run again: an
# existing cluster is reconfigured and (re)started, nothing is dropped.
#
# It prints one line saying what failed and exits non-zero when it cannot
# (no pg_createcluster, a cluster that will not start). Run it as root or
# as the postgres user (which must be able to write /var/lib/postgresql/<v>).
set -uo pipefail

fail() { echo "shard up: $*" >&2; exit 1; }

command -v pg_createcluster >/dev/null 2>&1 \
  || fail "pg_createcluster not found; install Debian's postgresql (apt-get install postgresql) to run the sharded tests"
command -v pg_isready >/dev/null 2>&1 || fail "pg_isready not found; install postgresql-client"
ls /etc/postgresql >/dev/null 2>&1 || fail "no /etc/postgresql: no Debian PostgreSQL cluster is installed"
version=$(ls /etc/postgresql | sort -n | tail -1)
[ -n "$version" ] || fail "no PostgreSQL version under /etc/postgresql"
case "$(id -un)" in
  root | postgres) ;;
  *) fail "run as root or as the postgres user (now $(id -un))" ;;
esac

# psql as the superuser over TCP (trust), whichever user runs this.
sql() { psql -X -q -h 127.0.0.1 -p "$1" -U postgres -d postgres -tAc "$2"; }

waitready() {
  for _ in $(seq 1 30); do
    pg_isready -h 127.0.0.1 -p "$1" -q && return 0
    sleep 1
  done
  return 1
}

# The coordinator: the main cluster, started when it is down.
if ! pg_isready -h 127.0.0.1 -p 5432 -q 2>/dev/null; then
  pg_ctlcluster --skip-systemctl-redirect "$version" main start >"${TMPDIR:-/tmp}/counterpart-shard-$(id -un)-main.log" 2>&1 \
    || fail "the main cluster $version/main would not start (see ${TMPDIR:-/tmp}/counterpart-shard-$(id -un)-main.log)"
  waitready 5432 || fail "the main cluster on 127.0.0.1:5432 did not become ready in 30 s"
fi

for spec in cpshard1:5441 cpshard2:5442; do
  name=${spec%%:*}
  port=${spec##*:}
  conf=/etc/postgresql/$version/$name
  log=${TMPDIR:-/tmp}/counterpart-shard-$(id -un)-$name.log
  if [ ! -d "$conf" ]; then
    pg_createcluster "$version" "$name" -p "$port" >"$log" 2>&1 \
      || fail "pg_createcluster $version $name -p $port failed (see $log)"
  fi
  # Rewritten every time, so a rerun repairs a hand-edited cluster: trust
  # on the socket and on 127.0.0.1 only (these clusters hold synthetic
  # test rows and listen on no other address).
  cat >"$conf/pg_hba.conf" <<'EOF'
# counterpart shard test cluster (testdata/shard/up.sh): local trust only.
local all all trust
host  all all 127.0.0.1/32 trust
EOF
  mkdir -p "$conf/conf.d"
  cat >"$conf/conf.d/counterpart-shard.conf" <<EOF
# counterpart shard test cluster (testdata/shard/up.sh); modest memory, as
# two of these share a 2-core test machine with the coordinator.
port = $port
listen_addresses = '127.0.0.1'
max_connections = 40
shared_buffers = '32MB'
work_mem = '8MB'
maintenance_work_mem = '32MB'
max_worker_processes = 4
max_parallel_workers = 2
max_wal_size = '256MB'
fsync = off
synchronous_commit = off
EOF
  if [ "$(id -u)" = 0 ]; then
    chown postgres:postgres "$conf/pg_hba.conf" "$conf/conf.d" "$conf/conf.d/counterpart-shard.conf" 2>/dev/null || true
  fi
  if pg_isready -h 127.0.0.1 -p "$port" -q 2>/dev/null; then
    pg_ctlcluster --skip-systemctl-redirect "$version" "$name" reload >>"$log" 2>&1 \
      || fail "cluster $version/$name would not reload its configuration (see $log)"
  else
    pg_ctlcluster --skip-systemctl-redirect "$version" "$name" start >>"$log" 2>&1 \
      || fail "cluster $version/$name on port $port would not start (see $log and /var/log/postgresql/postgresql-$version-$name.log)"
  fi
  waitready "$port" || fail "cluster $version/$name on 127.0.0.1:$port did not become ready in 30 s"
  if [ "$(sql "$port" "SELECT 1 FROM pg_database WHERE datname = 'shard'")" != 1 ]; then
    sql "$port" "CREATE DATABASE shard" || fail "could not create database shard on 127.0.0.1:$port"
  fi
done
echo "shard up: coordinator 127.0.0.1:5432, shards cpshard1 127.0.0.1:5441 and cpshard2 127.0.0.1:5442 (database shard) ready"
