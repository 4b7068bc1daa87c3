#!/usr/bin/env bash
# bodysweep set-up: openEMS engine from Debian's archive + a private virtual environment.
#
# Idempotent: a second run checks a stamp and returns in seconds without changing anything.
# Usage: bash scripts/setup.sh            (from the repository root; tasks.sh calls it)
#
# Result:
#   .engine/py/     CSXCAD/ and openEMS/ Python modules (CPython 3.11) from Debian's python3-openems
#   .engine/prefix/ (Debian 13 only) the bookworm openEMS libraries and what they need, RPATH-patched
#   .venv/          virtual environment with bodysweep installed editable plus test extras;
#                   it sees .engine/py through a .pth file and nothing from the system dist-packages.
set -euo pipefail

ROOT="$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)"
ENGINE="$ROOT/.engine"
VENV="$ROOT/.venv"
PY="${BODYSWEEP_PYTHON:-python3}"
APT_OPTS=(-y -q --no-install-recommends -o DPkg::Lock::Timeout=300)

say() { printf '[setup] %s\n' "$*"; }
die() { printf '[setup] error: %s\n' "$*" >&2; exit 1; }

stamp_key() {
  # what the set-up result depends on: this script, the project's dependency list, the OS release
  cat "$ROOT/scripts/setup.sh" "$ROOT/pyproject.toml" /etc/debian_version 2>/dev/null | sha256sum | cut -c1-16
}
STAMP="$ENGINE/.stamp-$(stamp_key)"
if [[ -f "$STAMP" && -x "$VENV/bin/python" ]] && "$VENV/bin/python" -c "import CSXCAD, openEMS, bodysweep.workflow" 2>/dev/null; then
  say "up to date (.venv and .engine reused)"
  exit 0
fi

[[ -f /etc/debian_version ]] || die "this set-up supports Debian 12 (bookworm) and 13 (trixie) only"
DEB_MAJOR="$(cut -d. -f1 /etc/debian_version)"
case "$DEB_MAJOR" in
  12|13) ;;
  trixie*|forky*|sid*) DEB_MAJOR=13 ;;
  *) die "unsupported Debian release '$(cat /etc/debian_version)'; supported: 12, 13" ;;
esac

"$PY" -c 'import sys; assert sys.version_info[:2] == (3, 11), sys.version' 2>/dev/null \
  || die "$PY must be CPython 3.11 (the openEMS modules are CPython 3.11 extensions); set BODYSWEEP_PYTHON=/path/to/python3.11"

SUDO=""
if [[ "$(id -u)" != 0 ]]; then
  if command -v sudo >/dev/null && sudo -n true 2>/dev/null; then SUDO="sudo"; fi
fi

need_root() {
  # $@: Debian packages that are missing
  if [[ "$(id -u)" != 0 && -z "$SUDO" ]]; then
    die "missing Debian packages: $*. Run as root or: sudo apt-get install --no-install-recommends $*   then run this again"
  fi
}

missing_pkgs() {
  local out=()
  for p in "$@"; do
    dpkg-query -W -f='${Status}' "$p" 2>/dev/null | grep -q "install ok installed" || out+=("$p")
  done
  echo "${out[@]:-}"
}

apt_install() {
  local miss; miss="$(missing_pkgs "$@")"
  [[ -z "$miss" ]] && return 0
  need_root $miss
  say "apt-get install $miss"
  $SUDO apt-get update -q -o DPkg::Lock::Timeout=300 >/dev/null || $SUDO apt-get update -q
  # shellcheck disable=SC2086
  $SUDO apt-get install "${APT_OPTS[@]}" $miss >/dev/null
}

mkdir -p "$ENGINE/py" "$ENGINE/debs"

install_py_modules() {
  # $1: path to python3-openems .deb
  local tmp; tmp="$(mktemp -d)"
  dpkg-deb -x "$1" "$tmp"
  local dp="$tmp/usr/lib/python3/dist-packages"
  rm -rf "$ENGINE/py/CSXCAD" "$ENGINE/py/openEMS"
  cp -r "$dp/CSXCAD" "$dp/openEMS" "$ENGINE/py/"
  # CSXCAD's CSRectGrid imports SmoothMeshLines as a top-level module; provide it without its
  # plotting import (pylab is only used by a demo function there).
  sed 's/^import pylab as plt$/plt = None  # plotting import dropped by bodysweep set-up/' \
    "$dp/CSXCAD/SmoothMeshLines.py" > "$ENGINE/py/SmoothMeshLines.py"
  rm -rf "$tmp"
}

if [[ "$DEB_MAJOR" == 12 ]]; then
  apt_install libopenems0 libcsxcad0 libnf2ff0 ca-certificates
  if [[ ! -f "$ENGINE/py/openEMS/openEMS.cpython-311-x86_64-linux-gnu.so" && ! -d "$ENGINE/py/openEMS" ]] || [[ ! -f "$ENGINE/py/SmoothMeshLines.py" ]]; then
    say "fetching python3-openems (modules only)"
    rm -f "$ENGINE/debs"/python3-openems_*.deb
    (cd "$ENGINE/debs" && apt-get download python3-openems 2>/dev/null) \
      || { apt_install ca-certificates; $SUDO apt-get update -q >/dev/null; (cd "$ENGINE/debs" && apt-get download python3-openems); }
    install_py_modules "$(ls "$ENGINE/debs"/python3-openems_*.deb | head -1)"
  fi
else
  # Debian 13: no openEMS package. Runtime libraries from trixie, openEMS itself from bookworm
  # through a private apt configuration (nothing registered with dpkg), RPATHs set with patchelf.
  apt_install libfparser-4.5.2t64 libtinyxml2.6.2v5 libtbb12 libsz2 libcurl4t64 libdouble-conversion3 \
    libjpeg62-turbo libpng16-16t64 libtiff6 libwebp7 liblz4-1 libexpat1 libgomp1 patchelf binutils ca-certificates \
    libaec0 libgl1 libx11-6 libxcursor1 libfreetype6 libogg0 libtheora0 libxml2 libnetcdf22 libglew2.2 \
    libpugixml1v5 libgl2ps1.4 libproj25 libsqlite3-0 zlib1g libcgns4.4 libexodusii0t64 libvtk9.3t64 || true
  PREFIX="$ENGINE/prefix"
  APTDIR="$ENGINE/apt-bookworm"
  if [[ ! -f "$PREFIX/.complete" ]]; then
    say "fetching bookworm openEMS .debs through a private apt configuration"
    mkdir -p "$APTDIR/lists/partial" "$APTDIR/cache/archives/partial" "$APTDIR/etc/preferences.d" "$APTDIR/etc/trusted.gpg.d"
    cat > "$APTDIR/etc/sources.list" <<'SRC'
deb http://deb.debian.org/debian bookworm main
deb http://deb.debian.org/debian-security bookworm-security main
SRC
    touch "$APTDIR/status"
    APT_PRIV=(-o "Dir::Etc::SourceList=$APTDIR/etc/sources.list" -o "Dir::Etc::SourceParts=/nonexistent"
              -o "Dir::State::Lists=$APTDIR/lists" -o "Dir::Cache=$APTDIR/cache" -o "Dir::State::status=$APTDIR/status"
              -o "Dir::Etc::Preferences=$APTDIR/etc/preferences" -o "Dir::Etc::PreferencesParts=$APTDIR/etc/preferences.d"
              -o "APT::Architecture=amd64" -o "Acquire::Languages=none")
    # trust the Debian archive keys the system already has (bookworm keys ship in debian-archive-keyring)
    apt-get "${APT_PRIV[@]}" update -q >/dev/null
    rm -rf "$ENGINE/debs13"; mkdir -p "$ENGINE/debs13"
    (cd "$ENGINE/debs13" && apt-get "${APT_PRIV[@]}" download \
        libopenems0 libcsxcad0 libnf2ff0 libvtk9.1 libhdf5-103-1 libhdf5-hl-100 libboost-thread1.74.0 \
        libjsoncpp25 python3-openems)
    rm -rf "$PREFIX"; mkdir -p "$PREFIX"
    for d in "$ENGINE/debs13"/*.deb; do dpkg-deb -x "$d" "$PREFIX"; done
    install_py_modules "$(ls "$ENGINE/debs13"/python3-openems_*.deb | head -1)"
    LIBDIR="$PREFIX/usr/lib/x86_64-linux-gnu"
    # every private shared object, and the Python modules, find their siblings through RPATH
    while IFS= read -r so; do
      patchelf --set-rpath "$LIBDIR" "$so" 2>/dev/null || true
    done < <(find "$LIBDIR" "$ENGINE/py" -name '*.so*' -type f)
    bad=0
    while IFS= read -r so; do
      if ldd "$so" 2>/dev/null | grep -q "not found"; then
        say "unresolved libraries for $so:"; ldd "$so" | grep "not found" >&2; bad=1
      fi
    done < <(find "$ENGINE/py" -name '*.so' -type f)
    [[ "$bad" == 0 ]] || die "some openEMS libraries are missing (see above); install the trixie packages that provide them"
    touch "$PREFIX/.complete"
  fi
fi

if [[ ! -x "$VENV/bin/python" ]]; then
  say "creating .venv from $("$PY" -c 'import sys; print(sys.executable)')"
  "$PY" -m venv "$VENV"
fi
say "installing bodysweep (editable, with test extras) into .venv"
"$VENV/bin/python" -m pip install -q --disable-pip-version-check -e "$ROOT[test]" 2> >(grep -v "is ignored: it is neither a file nor a directory" >&2)
SITE="$("$VENV/bin/python" -c 'import sysconfig; print(sysconfig.get_paths()["purelib"])')"
echo "$ENGINE/py" > "$SITE/bodysweep_openems.pth"

"$VENV/bin/python" - <<'PYCHECK'
import CSXCAD, openEMS, numpy
from CSXCAD import ContinuousStructure
from openEMS import openEMS as _engine
import bodysweep.workflow
print(f"[setup] openEMS modules import with numpy {numpy.__version__}")
PYCHECK
# record engine versions from the package file names (read by `bodysweep --version`)
deb_ver() { basename "$(ls "$ENGINE"/debs*/"$1"_*.deb 2>/dev/null | head -1)" .deb | cut -d_ -f2; }
dpkg_ver() { dpkg-query -W -f='${Version}' "$1" 2>/dev/null || true; }
oe="$(dpkg_ver libopenems0)"; [[ -n "$oe" ]] || oe="$(deb_ver libopenems0)"
cx="$(dpkg_ver libcsxcad0)"; [[ -n "$cx" ]] || cx="$(deb_ver libcsxcad0)"
printf '{"openEMS": "%s", "CSXCAD": "%s"}\n' "$oe" "$cx" > "$ENGINE/py/bodysweep_engine_versions.json"
rm -f "$ENGINE"/.stamp-*
touch "$STAMP"
say "done"
