#!/usr/bin/env bash
# Installs the servers integration tests start (Mosquitto, InfluxDB) and the browser the
# dashboard's browser test drives (Debian chromium) when run as root.
set -u
need=()
command -v mosquitto >/dev/null || need+=(mosquitto)
command -v influxd >/dev/null || need+=(influxdb)
[ -x /usr/bin/chromium ] || need+=(chromium)
[ ${#need[@]} -eq 0 ] && exit 0
if [ "$(id -u)" = 0 ]; then
  apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq "${need[@]}"
else
  echo "integration tests need: ${need[*]} (Debian: sudo apt-get install ${need[*]})" >&2
fi
