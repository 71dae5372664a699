#!/usr/bin/env bash
# Remove what deploy/install.sh installed.
#
#   sudo deploy/uninstall.sh               # keeps /etc/taprig, /var/lib/taprig and the user
#   sudo deploy/uninstall.sh --purge       # also the configuration, THE POINT SETS and the user
#   sudo deploy/uninstall.sh --root /stage # in another root
set -euo pipefail

root=/
purge=0
while (($#)); do
    case "$1" in
        --root) root="${2:?}"; shift 2 ;;
        --purge) purge=1; shift ;;
        *) echo "usage: $0 [--root DIR] [--purge]" >&2; exit 2 ;;
    esac
done
root="${root%/}"
[[ $(id -u) == 0 ]] || { echo "uninstall.sh: run as root (sudo)" >&2; exit 1; }

if [[ -z "$root" && -d /run/systemd/system ]]; then
    systemctl disable --now taprigd.service 2>/dev/null || true
elif [[ -e "$root/etc/systemd/system/taprigd.service" ]]; then
    if [[ -z "$root" ]]; then systemctl disable taprigd.service || true
    else systemctl --root="$root" disable taprigd.service || true; fi
fi
rm -f "$root/etc/systemd/system/taprigd.service" "$root/etc/udev/rules.d/70-taprig-device.rules"
[[ -z "$root" && -d /run/systemd/system ]] && systemctl daemon-reload
rm -rf "$root/opt/taprig"

if ((purge)); then
    rm -rf "$root/etc/taprig" "$root/var/lib/taprig"
    if grep -q '^taprig:' "$root/etc/passwd"; then
        userdel_root=()
        [[ -z "$root" ]] || userdel_root=(--root "$root")
        userdel "${userdel_root[@]}" taprig
    fi
    echo "Removed taprigd, its configuration, its data and the user taprig."
else
    echo "Removed taprigd. Kept: /etc/taprig (configuration), /var/lib/taprig (the point sets)"
    echo "and the user taprig; 'uninstall.sh --purge' removes them too."
fi
