#!/usr/bin/env bash
# Install taprigd on a Debian-based single-board computer, from a checkout of taprig:
#
#   sudo deploy/install.sh                 # this machine: installs, enables and starts
#   sudo deploy/install.sh --root /stage   # into another root (an image being built, a test)
#
# What goes where:
#   /opt/taprig                    a Python virtual environment with taprig installed
#   /etc/taprig/taprigd.toml       the configuration (kept if it exists; the example beside it)
#   /var/lib/taprig                the point-set store, token and rig id (user taprig, 0700)
#   /etc/systemd/system/taprigd.service, /etc/udev/rules.d/70-taprig-device.rules (example)
#   user and group taprig (system account, no login), member of dialout
# Running it again upgrades taprig and keeps the configuration and the data.
set -euo pipefail

root=/
source_dir="$(cd "$(dirname "$0")/.." && pwd)"
python=python3
usage() {
    echo "usage: $0 [--root DIR] [--source DIR] [--python PYTHON]" >&2
    exit 2
}
while (($#)); do
    case "$1" in
        --root) root="${2:?}"; shift 2 ;;
        --source) source_dir="${2:?}"; shift 2 ;;
        --python) python="${2:?}"; shift 2 ;;
        *) usage ;;
    esac
done
root="${root%/}"
[[ $(id -u) == 0 ]] || { echo "install.sh: run as root (sudo)" >&2; exit 1; }
[[ -f "$source_dir/pyproject.toml" ]] || { echo "install.sh: no taprig checkout at $source_dir" >&2; exit 1; }
"$python" -c 'import sys; sys.exit(sys.version_info < (3, 11))' \
    || { echo "install.sh: taprig needs Python 3.11 or newer ($python is older)" >&2; exit 1; }

step() { echo "== $*"; }
live() { [[ -z "$root" ]]; }  # installing onto the running system, not into another root

if live && ! "$python" -c 'import ensurepip' 2>/dev/null; then
    step "Debian's python3-venv (the virtual environment needs it)"
    apt-get update -qq && apt-get install -y -qq python3-venv
fi

step "user taprig (group dialout for the serial device)"
if ! grep -q '^taprig:' "$root/etc/passwd"; then
    useradd_root=()
    live || useradd_root=(--root "$root")
    useradd "${useradd_root[@]}" --system --user-group --groups dialout \
        --home-dir /var/lib/taprig --no-create-home --shell /usr/sbin/nologin \
        --comment "taprig capture daemon" taprig
fi
# Numeric ids from the target root's own files: the host may not know this user.
uid="$(awk -F: '$1 == "taprig" {print $3}' "$root/etc/passwd")"
gid="$(awk -F: '$1 == "taprig" {print $4}' "$root/etc/passwd")"

step "virtual environment in /opt/taprig"
[[ -x "$root/opt/taprig/bin/python" ]] || "$python" -m venv "$root/opt/taprig"
"$root/opt/taprig/bin/python" -m pip install -q --disable-pip-version-check --upgrade "$source_dir"

step "configuration in /etc/taprig"
install -d -m 0755 "$root/etc/taprig"
install -m 0644 "$source_dir/deploy/taprigd.example.toml" "$root/etc/taprig/taprigd.example.toml"
if [[ ! -e "$root/etc/taprig/taprigd.toml" ]]; then
    install -m 0640 -o 0 -g "$gid" "$source_dir/deploy/taprigd.example.toml" \
        "$root/etc/taprig/taprigd.toml"
fi

step "state in /var/lib/taprig"
install -d -m 0700 -o "$uid" -g "$gid" "$root/var/lib/taprig"

step "systemd unit and udev rule"
install -D -m 0644 "$source_dir/deploy/taprigd.service" "$root/etc/systemd/system/taprigd.service"
if [[ ! -e "$root/etc/udev/rules.d/70-taprig-device.rules" ]]; then
    install -D -m 0644 "$source_dir/deploy/70-taprig-device.rules" \
        "$root/etc/udev/rules.d/70-taprig-device.rules"
fi

if live && [[ -d /run/systemd/system ]]; then
    step "enable and start taprigd"
    systemctl daemon-reload
    systemctl enable taprigd.service
    systemctl restart taprigd.service
    udevadm control --reload || true
else
    step "enable taprigd (starts at the next boot)"
    if live; then systemctl enable taprigd.service; else systemctl --root="$root" enable taprigd.service; fi
fi

cat <<DONE
Installed. Next:
  - set [device] url (and [[channels]]) in /etc/taprig/taprigd.toml; the example runs the
    simulated test piece, so the rig answers before any hardware is connected
  - for a stable device name, edit /etc/udev/rules.d/70-taprig-device.rules
  - systemctl restart taprigd; taprigd status: /opt/taprig/bin/taprigd status -c /etc/taprig/taprigd.toml
  - pair a workstation: /opt/taprig/bin/taprigd pair -c /etc/taprig/taprigd.toml
DONE
