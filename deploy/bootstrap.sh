#!/usr/bin/env bash
# Installs what a fresh Debian/Ubuntu machine lacks to build and test cubehunt:
# m4 and a C compiler (GMP is built from source under the `rug` crate), and, for the
# status-page browser test, Chromium. Idempotent; does nothing when all is present.
set -euo pipefail
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
