#!/usr/bin/env bash
# Installs what a fresh Debian/Ubuntu machine lacks to build and test cubehunt:
# m4 and a C compiler (GMP is built from source under the `rug` crate), and, for the
# status-page browser test, Chromium; for the PostgreSQL store's tests, a PostgreSQL server
# at 127.0.0.1:5432 with trust authentication for local TCP and a database `test` (started
# when installed but stopped, installed from Debian's `postgresql` when missing; skip with
# CUBEHUNT_SKIP_POSTGRES=1). Idempotent; does nothing when all is present.
#
#   bash deploy/bootstrap.sh               everything the tests need
#   bash deploy/bootstrap.sh --build-only  only what building needs (m4, cc, make): enough
#                                          for the demo and for running a coordinator/worker
set -euo pipefail
case "${1:-}" in
  "") ;;
  --build-only) export CUBEHUNT_SKIP_BROWSER=1 CUBEHUNT_SKIP_POSTGRES=1 ;;
  -h|--help) sed -n '2,11p' "$0" | sed 's/^# \{0,1\}//'; exit 0 ;;
  *) echo "bootstrap: unknown argument ${1:?}; use --build-only or nothing (see --help)" >&2; exit 2 ;;
esac
need=()
command -v m4 >/dev/null 2>&1 || need+=(m4)
command -v cc >/dev/null 2>&1 || need+=(gcc)
command -v make >/dev/null 2>&1 || need+=(make)
if [ "${CUBEHUNT_SKIP_BROWSER:-0}" != 1 ] && ! command -v chromium >/dev/null 2>&1; then
  need+=(chromium)
fi
if [ ${#need[@]} -gt 0 ]; then
  if [ "$(id -u)" -ne 0 ]; then SUDO=sudo; else SUDO=; fi
  if command -v apt-get >/dev/null 2>&1; then
    echo "bootstrap: installing ${need[*]}" >&2
    $SUDO apt-get update -qq
    DEBIAN_FRONTEND=noninteractive $SUDO apt-get install -y -qq --no-install-recommends "${need[@]}" >/dev/null
  else
    echo "bootstrap: please install: ${need[*]} (no apt-get here)" >&2
    exit 1
  fi
fi
command -v cargo >/dev/null 2>&1 || { echo "bootstrap: cargo not found; install Rust from rustup first" >&2; exit 1; }

pg_up() { (exec 3<>/dev/tcp/127.0.0.1/5432) 2>/dev/null; }
if [ "${CUBEHUNT_SKIP_POSTGRES:-0}" != 1 ] && ! pg_up; then
  if [ "$(id -u)" -ne 0 ]; then SUDO=sudo; else SUDO=; fi
  fresh=0
  if ! ls /usr/lib/postgresql/*/bin/postgres >/dev/null 2>&1; then
    if command -v apt-get >/dev/null 2>&1; then
      echo "bootstrap: installing postgresql" >&2
      $SUDO apt-get update -qq
      DEBIAN_FRONTEND=noninteractive $SUDO apt-get install -y -qq --no-install-recommends postgresql >/dev/null
      fresh=1
    else
      echo "bootstrap: no PostgreSQL here and no apt-get; the PostgreSQL tests will say they were skipped" >&2
    fi
  fi
  if ls /usr/lib/postgresql/*/bin/postgres >/dev/null 2>&1; then
    echo "bootstrap: starting postgresql" >&2
    $SUDO service postgresql start >/dev/null 2>&1 || $SUDO pg_ctlcluster --skip-systemctl-redirect "$(ls /etc/postgresql | sort -V | tail -1)" main start || true
    for _ in $(seq 1 30); do pg_up && break; sleep 1; done
    if [ "$fresh" = 1 ]; then
      # A fresh Debian cluster asks for passwords over TCP: let local TCP in without one
      # (for the tests; never do this on a shared host) and make the `test` database.
      for f in /etc/postgresql/*/main/pg_hba.conf; do
        $SUDO sed -i '1i host all all 127.0.0.1/32 trust' "$f"
      done
      $SUDO service postgresql reload >/dev/null 2>&1 || true
      sleep 1
      $SUDO -u postgres createdb test 2>/dev/null || su postgres -c "createdb test" 2>/dev/null || true
    fi
  fi
fi
