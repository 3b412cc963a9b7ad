# Shared set-up for the scripts in this folder: system packages the build and the tests need.
# Sourced, not run.

as_root() {
    if [ "$(id -u)" -eq 0 ]; then "$@"; elif command -v sudo >/dev/null 2>&1; then sudo "$@"; else
        echo "shearbox: need root to install system packages ($*); run as root or install them yourself" >&2
        return 1
    fi
}

apt_updated=0
apt_install() {
    if ! command -v apt-get >/dev/null 2>&1; then
        echo "shearbox: missing system packages: $*" >&2
        echo "  this is not a Debian/Ubuntu machine: install the equivalent with your package manager" >&2
        echo "  (the NetCDF C library with headers and its tools ncgen/ncdump, e.g. netcdf-devel or 'brew install netcdf')" >&2
        return 1
    fi
    if [ "$apt_updated" -eq 0 ]; then
        as_root apt-get update -qq
        apt_updated=1
    fi
    as_root env DEBIAN_FRONTEND=noninteractive apt-get install -y -qq --no-install-recommends "$@" >/dev/null
}

# The NetCDF C library (headers for the build) and netCDF-C's own tools (ncgen, ncdump).
ensure_netcdf() {
    local need=()
    if ! pkg-config --exists netcdf 2>/dev/null && [ ! -f /usr/include/netcdf.h ]; then need+=(libnetcdf-dev); fi
    command -v pkg-config >/dev/null 2>&1 || need+=(pkg-config)
    command -v ncdump >/dev/null 2>&1 || need+=(netcdf-bin)
    if [ ${#need[@]} -gt 0 ]; then
        echo "shearbox: installing ${need[*]}" >&2
        apt_install "${need[@]}"
    fi
}

# Python 3 with venv, for the numpy reference.
ensure_python() {
    if ! command -v python3 >/dev/null 2>&1 || ! python3 -c 'import ensurepip, venv' >/dev/null 2>&1; then
        echo "shearbox: installing python3 and python3-venv" >&2
        apt_install python3 python3-venv python3-pip
    fi
}

# The UDUNITS-2 library, which the CF compliance checker (cfchecker from PyPI) loads.
ensure_udunits() {
    if ! ldconfig -p 2>/dev/null | grep -q 'libudunits2\.so '; then
        echo "shearbox: installing libudunits2-dev (for the CF compliance checker)" >&2
        apt_install libudunits2-dev
    fi
}

# ensure_pinned_venv VENV REQUIREMENTS: a Python virtual environment at VENV holding exactly the
# pins (name==version) of REQUIREMENTS; pip is not called when they are installed. Sets $py.
ensure_pinned_venv() {
    local venv="$1" reqs="$2"
    py="$venv/bin/python"
    [ -x "$py" ] || "${PYTHON:-python3}" -m venv "$venv"
    if ! "$py" - "$reqs" <<'PY'
import sys
from importlib.metadata import PackageNotFoundError, version

for line in open(sys.argv[1], encoding="utf-8"):
    line = line.split("#", 1)[0].strip()
    if not line:
        continue
    name, pinned = line.split("==")
    try:
        if version(name) != pinned:
            sys.exit(1)
    except PackageNotFoundError:
        sys.exit(1)
PY
    then
        "$venv/bin/pip" install --quiet --disable-pip-version-check -r "$reqs"
    fi
}

# Node.js (20 or newer) and npm, which run the browser test's driver (playwright-core).
ensure_node() {
    local major
    major=$(node -p 'process.versions.node.split(".")[0]' 2>/dev/null || echo 0)
    if [ "$major" -lt 20 ] || ! command -v npm >/dev/null 2>&1; then
        echo "shearbox: installing nodejs and npm (for the browser test)" >&2
        apt_install nodejs npm
        major=$(node -p 'process.versions.node.split(".")[0]' 2>/dev/null || echo 0)
        if [ "$major" -lt 20 ]; then
            echo "shearbox: the browser test needs Node.js 20 or newer; this machine has $(node --version 2>/dev/null || echo none)" >&2
            return 1
        fi
    fi
}

# Debian's Chromium, which the browser test drives headless, with a font for its text.
ensure_chromium() {
    local need=()
    [ -x /usr/bin/chromium ] || need+=(chromium)
    fc-list 2>/dev/null | grep -q . || need+=(fonts-dejavu-core)
    if [ ${#need[@]} -gt 0 ]; then
        echo "shearbox: installing ${need[*]} (for the browser test)" >&2
        apt_install "${need[@]}"
    fi
}

# ensure_playwright DIR: DIR/node_modules holds exactly the packages of DIR/package-lock.json
# (`npm ci`, which downloads no browser: playwright-core ships none); npm is not called when
# the installed playwright-core already has the locked version.
ensure_playwright() {
    local dir want have
    dir="$(cd "$1" && pwd)"
    ensure_node
    want=$(node -p "require('$dir/package-lock.json').packages['node_modules/playwright-core'].version")
    have=$(node -p "try { require('$dir/node_modules/playwright-core/package.json').version } catch (e) { '' }")
    if [ "$want" != "$have" ]; then
        echo "shearbox: installing playwright-core $want into $dir/node_modules" >&2
        (cd "$dir" && npm ci --no-audit --no-fund --loglevel=error)
    fi
}
