#!/usr/bin/env bash
# The README's test command: install what the tests need, then run the whole suite.
# On Debian as root it also installs KiCad (Debian package 'kicad') so the KiCad-backed
# tests run against KiCad's own pcbnew, and openEMS ('openems', 'python3-openems') for the
# full-wave tests; elsewhere those tests skip and say why.
set -euo pipefail
cd "$(dirname "$0")/.."

python=python3
if [ "$(id -u)" = "0" ] && command -v apt-get >/dev/null 2>&1; then
    missing=""
    [ -e /usr/lib/python3/dist-packages/pcbnew.py ] || missing="kicad python3-venv"
    command -v openEMS >/dev/null 2>&1 || missing="$missing openems python3-openems"
    if [ -n "$missing" ]; then
        echo "== installing Debian's $missing (about a minute)"
        apt-get update -qq
        # shellcheck disable=SC2086
        DEBIAN_FRONTEND=noninteractive apt-get install -y -qq --no-install-recommends $missing >/dev/null
    fi
fi
if command -v openEMS >/dev/null 2>&1; then
    # the full-wave tests run the engine; a broken install fails them instead of letting them skip
    export EBGLAYOUT_REQUIRE_OPENEMS=1
else
    echo "== openEMS is not installed here: the full-wave tests will be skipped with that reason"
fi
if [ -e /usr/lib/python3/dist-packages/pcbnew.py ] && [ -x /usr/bin/python3 ]; then
    # pcbnew is built for Debian's own python3: test in a venv made from it, which also sees pcbnew.
    if ! /usr/bin/python3 -c "import venv, ensurepip" >/dev/null 2>&1 && [ "$(id -u)" = "0" ]; then
        DEBIAN_FRONTEND=noninteractive apt-get install -y -qq --no-install-recommends python3-venv >/dev/null
    fi
    if [ ! -x .venv-kicad/bin/python ]; then
        /usr/bin/python3 -m venv --system-site-packages .venv-kicad
    fi
    python=.venv-kicad/bin/python
    export EBGLAYOUT_REQUIRE_KICAD=1
else
    echo "== KiCad is not installed here: the KiCad-backed tests will be skipped with that reason"
fi
echo "== installing ebglayout and its test dependencies into $("$python" -c 'import sys; print(sys.prefix)')"
"$python" -m pip install -q --disable-pip-version-check -e ".[test]"
echo "== running the test suite"
status=0
"$python" -m pytest -q -p no:cacheprovider "$@" || status=$?
if [ "$status" = "5" ]; then
    echo "pytest collected no tests" >&2
    exit 1
fi
# The KiCad-backed tests again under Debian 13's KiCad 9, in a root built inside the clone (see that script).
if [ "$#" -gt 0 ]; then
    echo "== KiCad 9 root skipped: pytest arguments were given, so only the host suite ran"
elif ! bash tools/kicad9-root.sh && [ "$status" = "0" ]; then
    status=1
fi
exit "$status"
