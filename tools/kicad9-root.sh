#!/usr/bin/env bash
# Runs the KiCad-backed tests (marker 'kicad', see tests/conftest.py) under the KiCad that Debian 13 (trixie)
# ships, in a root that debootstrap builds inside the clone (.ci-roots/trixie), so a regression for today's KiCad
# users fails CI while the host suite covers the KiCad of the host's own Debian.
#
# tools/test-all.sh calls this after the host suite.  It needs root, a Debian host and debootstrap (installed here
# when missing); where one is missing it skips with one line, except under CI=true, where that is a failure.
# EBGLAYOUT_SKIP_KICAD9=1 skips it on purpose (for developers; CI never sets it).
# The root is reused by later runs in the same clone; every mount is undone on exit, failure and Ctrl-C.
set -euo pipefail
cd "$(dirname "$0")/.."
repo=$PWD
suite=trixie
root=$repo/.ci-roots/$suite
tree=/srv/ebglayout            # the copy of the working tree, inside the root
venv=/srv/ebglayout-venv       # kept between runs: only the tree copy is renewed
base_done=$root/.ebglayout-base-ok

say() { echo "== KiCad 9 root: $*"; }

unavailable() {
    if [ "${CI:-}" = "true" ]; then
        echo "== KiCad 9 root: FAILED, CI must run the KiCad 9 tests but $1" >&2
        exit 1
    fi
    echo "== KiCad 9 root skipped: $1"
    exit 0
}

if [ "${EBGLAYOUT_SKIP_KICAD9:-}" = "1" ]; then
    echo "== KiCad 9 root skipped: EBGLAYOUT_SKIP_KICAD9=1"
    exit 0
fi
[ "$(id -u)" = "0" ] || unavailable "building a Debian root needs root (this runs as $(id -un))"
host_id=$( . /etc/os-release 2>/dev/null && echo "${ID:-}" ) || true
host_codename=$( . /etc/os-release 2>/dev/null && echo "${VERSION_CODENAME:-}" ) || true
[ "$host_id" = "debian" ] && [ -n "$host_codename" ] || unavailable "the host is not Debian (/etc/os-release)"
if ! command -v debootstrap >/dev/null 2>&1; then
    say "installing debootstrap"
    { apt-get update -qq && DEBIAN_FRONTEND=noninteractive apt-get install -y -qq --no-install-recommends \
        debootstrap >/dev/null; } || unavailable "debootstrap cannot be installed"
fi

host_mirror() {
    # The host's own Debian archive: the first enabled 'deb' source for the host's release, deb822 or one-line.
    local f uri
    for f in /etc/apt/sources.list /etc/apt/sources.list.d/*.list /etc/apt/sources.list.d/*.sources; do
        [ -f "$f" ] || continue
        case "$f" in
        *.sources) uri=$(awk -v want="$host_codename" '
            function pick() {
                if (types ~ /(^| )deb( |$)/ && (" " suites " ") ~ (" " want " ") && enabled != "no" && uris != "") {
                    split(uris, u, " "); print u[1]; done = 1; exit
                }
                types = suites = uris = ""; enabled = "yes"
            }
            BEGIN { enabled = "yes" }
            /^[ \t]*$/ { pick(); next }
            /^[ \t]*#/ { next }
            { key = tolower($1); sub(/:$/, "", key); $1 = ""; sub(/^ +/, "")
              if (key == "types") types = $0; else if (key == "uris") uris = $0
              else if (key == "suites") suites = $0; else if (key == "enabled") enabled = tolower($0) }
            END { if (!done) pick() }' "$f") ;;
        *) uri=$(awk -v want="$host_codename" '$1 == "deb" {
                i = 2; if ($2 ~ /^\[/) { while (i < NF && $i !~ /\]$/) i++; i++ }
                if ($(i + 1) == want) { print $i; exit } }' "$f") ;;
        esac
        if [ -n "$uri" ]; then echo "$uri"; return 0; fi
    done
    return 1
}

mounts_under() {
    # Mount points at or below $1, deepest first, as /proc/self/mountinfo spells them (a space is \040).
    MOUNT_PREFIX=${1// /\\040} awk 'BEGIN { p = ENVIRON["MOUNT_PREFIX"] }
        $5 == p || index($5, p "/") == 1 { print $5 }' /proc/self/mountinfo | sort -r
}

unmount_root() {
    local m pass
    for pass in 1 2 3 4 5; do
        [ -z "$(mounts_under "$root")" ] && return 0
        while read -r m; do umount "$(printf '%b' "$m")" 2>/dev/null || true; done < <(mounts_under "$root")
        [ -z "$(mounts_under "$root")" ] && return 0
        sleep 1
    done
    while read -r m; do umount -l "$(printf '%b' "$m")" 2>/dev/null || true; done < <(mounts_under "$root")
    if [ -n "$(mounts_under "$root")" ]; then
        echo "== KiCad 9 root: could not unmount, still mounted:" >&2
        mounts_under "$root" >&2
        return 1
    fi
}

remove_inside_root() {
    # rm -rf only with nothing mounted anywhere in the root, and never across a file system boundary.
    if [ -n "$(mounts_under "$1")" ]; then
        echo "== KiCad 9 root: refusing to delete $1 while something is mounted there" >&2
        exit 1
    fi
    rm -rf --one-file-system "$1"
}

cleanup() {
    local status=$?
    trap - EXIT INT TERM
    unmount_root || status=1
    exit "$status"
}
trap cleanup EXIT
trap 'exit 130' INT
trap 'exit 143' TERM

in_root() {
    chroot "$root" env -u PYTHONPATH -u PYTHONHOME -u VIRTUAL_ENV \
        PATH=/usr/local/sbin:/usr/local/bin:/usr/sbin:/usr/bin:/sbin:/bin HOME=/root LC_ALL=C.UTF-8 \
        DEBIAN_FRONTEND=noninteractive "$@"
}

carry_pip_config() {
    # pip in the root reads the host's pip configuration files and PIP_* variables (chroot keeps the
    # environment).  Every local file or folder they name is copied or bound in read-only at the same path; a
    # file:// index comes with its parent folder, since index pages link to files beside them (../../files/).
    # Paths the root already has (its CA bundle, built from the same local CAs) stay the root's own.
    local sources=() targets=() d i token path
    IFS=: read -r -a xdg_dirs <<< "${XDG_CONFIG_DIRS:-/etc/xdg}"
    sources+=(/etc/pip.conf); targets+=(/etc/pip.conf)
    for d in "${xdg_dirs[@]}"; do sources+=("$d/pip/pip.conf"); targets+=("$d/pip/pip.conf"); done
    sources+=("${XDG_CONFIG_HOME:-${HOME:-/root}/.config}/pip/pip.conf" "${HOME:-/root}/.pip/pip.conf")
    targets+=(/root/.config/pip/pip.conf /root/.pip/pip.conf)
    if [ -n "${PIP_CONFIG_FILE:-}" ] && [ "$PIP_CONFIG_FILE" != /dev/null ]; then
        sources+=("$PIP_CONFIG_FILE"); targets+=("$PIP_CONFIG_FILE")
    fi
    local named=()
    for i in "${!sources[@]}"; do
        [ -f "${sources[$i]}" ] || continue
        mkdir -p "$root$(dirname "${targets[$i]}")"
        cp "${sources[$i]}" "$root${targets[$i]}"
        while read -r token; do named+=("$token"); done < <(grep -v '^[[:space:]]*[#;]' "${sources[$i]}" | tr -s ' \t' '\n\n')
    done
    while read -r token; do named+=("$token"); done < <(env | sed -n 's/^PIP_[A-Z_]*=//p' | tr -s ' \t' '\n\n')
    for token in "${named[@]}"; do
        path=${token#file://}
        [[ "$path" == /?* ]] && [ -e "$path" ] || continue
        if [[ "$token" == file://* ]] && [ -d "$path" ]; then path=$(dirname "$path"); fi
        if [ -d "$path" ]; then
            # An empty folder there is the mount point an earlier run left; anything else is the root's own.
            [ -z "$(ls -A "$root$path" 2>/dev/null)" ] || continue
            mkdir -p "$root$path"
            mount --bind "$path" "$root$path"
            mount -o remount,bind,ro "$root$path"
        elif [ ! -e "$root$path" ]; then
            mkdir -p "$root$(dirname "$path")"
            cp "$path" "$root$path"
        fi
    done
}

carry_apt_config() {
    # Settings that decide how the host's apt reaches its mirror (proxy, date checks of a frozen snapshot).
    local key value
    : > "$root/etc/apt/apt.conf.d/90ebglayout-host"
    for key in Acquire::http::Proxy Acquire::https::Proxy Acquire::Check-Valid-Until Acquire::Check-Date; do
        value=$(apt-config dump "$key" | sed -n "s|^$key \"\(.*\)\";$|\1|p" | head -n 1)
        [ -n "$value" ] && printf '%s "%s";\n' "$key" "$value" >> "$root/etc/apt/apt.conf.d/90ebglayout-host"
    done
    return 0
}

started=$SECONDS
mirror=$(host_mirror) || unavailable "no Debian archive for '$host_codename' in the host's apt sources"
say "Debian $suite from the host's mirror into ${root#"$repo"/}"

phase=$SECONDS
if [ ! -e "$base_done" ]; then
    [ -e "$root" ] && remove_inside_root "$root"
    mkdir -p "$root"
    apt_proxy=$(apt-config dump Acquire::http::Proxy | sed -n 's|^Acquire::http::Proxy "\(.*\)";$|\1|p')
    if [ -n "$apt_proxy" ] && [ -z "${http_proxy:-}" ]; then export http_proxy=$apt_proxy; fi
    debootstrap --variant=minbase "$suite" "$root" "$mirror" > "$repo/.ci-roots/debootstrap.log" 2>&1 || {
        tail -n 20 "$repo/.ci-roots/debootstrap.log" >&2
        unavailable "debootstrap of Debian $suite failed (log: .ci-roots/debootstrap.log)"
    }
    touch "$base_done"
fi
t_debootstrap=$((SECONDS - phase))

mount -t proc proc "$root/proc"
mount -t sysfs -o ro sysfs "$root/sys"
mkdir -p "$root/dev/pts" "$root/dev/shm"
mount -t devpts -o newinstance,ptmxmode=0666 devpts "$root/dev/pts"
mount -t tmpfs -o mode=1777 tmpfs "$root/dev/shm"
cp /etc/resolv.conf "$root/etc/resolv.conf"
printf '#!/bin/sh\nexit 101\n' > "$root/usr/sbin/policy-rc.d"   # no services start inside the root
chmod 755 "$root/usr/sbin/policy-rc.d"
if [ -d /usr/local/share/ca-certificates ]; then
    mkdir -p "$root/usr/local/share/ca-certificates"
    cp -r /usr/local/share/ca-certificates/. "$root/usr/local/share/ca-certificates/"
fi
echo "deb $mirror $suite main" > "$root/etc/apt/sources.list"
carry_apt_config

phase=$SECONDS
# Debian 13 has no split package for KiCad's Python module: pcbnew.py and _pcbnew.so are in 'kicad' itself.
say "installing python3, python3-venv, ca-certificates and kicad"
in_root apt-get update -qq || unavailable "apt-get update in the root failed (mirror $mirror)"
in_root apt-get install -y -qq --no-install-recommends python3 python3-venv ca-certificates kicad >/dev/null \
    || unavailable "apt-get could not install KiCad and Python in the root"
in_root update-ca-certificates >/dev/null
t_apt=$((SECONDS - phase))

carry_pip_config
remove_inside_root "$root$tree"
mkdir -p "$root$tree"
tar -C "$repo" --exclude=./.git --exclude=./.ci-roots --exclude='./.venv*' --exclude=__pycache__ \
    --exclude='*.egg-info' --exclude=./build -cf - . | tar -C "$root$tree" -xf -

phase=$SECONDS
# As tools/test-all.sh does on the host: a venv from the root's own python3 that also sees Debian's pcbnew.
[ -x "$root$venv/bin/python" ] || in_root /usr/bin/python3 -m venv --system-site-packages "$venv"
say "installing ebglayout and its test dependencies into the root's venv"
in_root sh -c "cd $tree && $venv/bin/python -m pip install -q --disable-pip-version-check -e '.[test]'"
t_pip=$((SECONDS - phase))

phase=$SECONDS
say "$(in_root "$venv/bin/python" -c 'import sys, pcbnew; print("KiCad", pcbnew.GetBuildVersion(), "with Python", sys.version.split()[0])')"
status=0
in_root sh -c "cd $tree && EBGLAYOUT_REQUIRE_KICAD=1 $venv/bin/python -m pytest -q -p no:cacheprovider -m kicad" \
    || status=$?
t_tests=$((SECONDS - phase))
if [ "$status" = "5" ]; then
    echo "== KiCad 9 root: pytest selected no KiCad-backed test" >&2
    status=1
fi
say "debootstrap ${t_debootstrap} s, apt ${t_apt} s, pip ${t_pip} s, tests ${t_tests} s, total $((SECONDS - started)) s"
exit "$status"
