#!/usr/bin/env bash
# System packages ringgauge needs beyond Python wheels: the libraries Qt loads (also offscreen), a virtual
# screen for screenshots, PostgreSQL for the shared records store tests, poppler to render certificates.
set -euo pipefail
need=()
pkgs=(libgl1 libegl1 libxkbcommon0 libxkbcommon-x11-0 libfontconfig1 libdbus-1-3 fonts-dejavu-core
      xvfb libxcb-icccm4 libxcb-keysyms1 libxcb-image0 libxcb-render-util0 libxcb-cursor0 libxcb-shape0
      libxcb-xinerama0 libxcb-randr0 libxcb-xkb1 postgresql poppler-utils python3-venv)
command -v dpkg-query >/dev/null 2>&1 || { echo "ringgauge: no dpkg here; install the Qt runtime libraries by hand"; exit 0; }
for p in "${pkgs[@]}"; do
  dpkg-query -W -f='${Status}' "$p" 2>/dev/null | grep -q "install ok installed" || need+=("$p")
done
[ ${#need[@]} -eq 0 ] && exit 0
if [ "$(id -u)" -ne 0 ] && ! command -v sudo >/dev/null 2>&1; then
  echo "ringgauge: missing system packages: ${need[*]} (install them as root)"; exit 0
fi
SUDO=""; [ "$(id -u)" -ne 0 ] && SUDO="sudo"
echo "ringgauge: installing system packages: ${need[*]}"
export DEBIAN_FRONTEND=noninteractive
$SUDO apt-get update -qq
$SUDO apt-get install -y -qq --no-install-recommends "${need[@]}" >/dev/null
