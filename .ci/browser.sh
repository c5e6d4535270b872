#!/usr/bin/env bash
# The dashboard in a real browser: installs Chromium (Debian package) and
# Node.js when missing, then runs host-sim/tests/gateway_web.rs, which starts
# `envord gateway web` on a loopback port over a store filled by
# `gateway import` and drives headless Chromium over the DevTools protocol
# (host-sim/tests/browser/drive.mjs). A browser that cannot start FAILS it.
# With ENVORD_WEB_SHOTS=DIR the run writes the page screenshots there
# (docs/web/ holds the committed ones).
# `--service`: the dashboard served by `gateway serve` over a store the
# service fills from the MQTT replay (host-sim/tests/gateway_web_serve.rs,
# SQLite and PostgreSQL), under .ci/services.sh (Mosquitto, PostgreSQL).
set -euo pipefail
cd "$(dirname "$0")/.."
need=()
command -v chromium >/dev/null 2>&1 || need+=(chromium)
command -v node >/dev/null 2>&1 || need+=(nodejs)
if [ ${#need[@]} -gt 0 ]; then
  apt-get update -qq
  DEBIAN_FRONTEND=noninteractive apt-get install -y -qq "${need[@]}" >/dev/null
fi
chromium --version
node --version
case "${1:-}" in
  --install-only) ;;
  --service) bash .ci/services.sh cargo test -p host-sim --features service-tests --locked \
      --test gateway_web_serve -- --test-threads=1 --nocapture ;;
  *) cargo test -p host-sim --locked --test gateway_web ;;
esac
