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
#
# Debian 12 (bookworm): libopenems0 libcsxcad0 libnf2ff0 are apt-installed; only the module folders
#   of python3-openems (same version as the installed libopenems0) are extracted, nothing else of it.
# Debian 13 (trixie): there is no openEMS package. The ordinary trixie runtime libraries are
#   apt-installed; the bookworm .debs of openEMS and of the libraries trixie no longer ships are
#   downloaded through a private apt configuration in .engine/apt-bookworm (own sources list, lists,
#   cache and status; nothing is registered with dpkg and the system's sources stay untouched),
#   unpacked into .engine/prefix and given $ORIGIN-relative RPATHs with patchelf, so no
#   LD_LIBRARY_PATH is needed. ldd then proves that nothing is missing.
#   To fetch newer bookworm point releases: rm -rf .engine/prefix and run this again.
set -euo pipefail

ROOT="$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)"
ENGINE="$ROOT/.engine"
VENV="$ROOT/.venv"
PY="${BODYSWEEP_PYTHON:-python3}"
PREFIX="$ENGINE/prefix"
MARKER="$PREFIX/.complete"
APT_OPTS=(-y -q --no-install-recommends -o DPkg::Lock::Timeout=300)
# apt's download sandbox user (_apt) cannot write into our folders; download as ourselves instead
# (otherwise apt warns "Download is performed unsandboxed as root", which is harmless but noisy).
APT_SELF=(-o "APT::Sandbox::User=$(id -un)")

# Debian 13: bookworm packages unpacked into the private prefix (openEMS, and the libraries of the
# exact sonames the bookworm binaries were linked against that trixie does not ship)
BOOKWORM_DEBS=(libopenems0 libcsxcad0 libnf2ff0 libvtk9.1 libhdf5-103-1 libhdf5-hl-100
               libboost-thread1.74.0 libjsoncpp25 python3-openems)
# Debian 13: trixie packages that provide the other libraries of those binaries (checked with ldd
# in a trixie chroot), patchelf for the RPATHs, and libffi8 for ctypes (numpy needs it; a pyenv
# CPython built on Debian 12 finds no libffi.so.8 on a minimal trixie otherwise), ca-certificates for pip)
TRIXIE_PKGS=(libfparser4 libtinyxml2.6.2v5 libtbb12 libsz2 libcurl4t64 libssl3t64 libdouble-conversion3
             libjpeg62-turbo libpng16-16t64 libtiff6 libwebp7 liblz4-1 libexpat1 liblzma5 zlib1g
             libgomp1 libffi8 patchelf ca-certificates)

say() { printf '[setup] %s\n' "$*"; }
die() { printf '[setup] error: %s\n' "$*" >&2; exit 1; }

stamp_key() {
  # what the set-up result depends on: this script, the project's dependency list, the OS release,
  # the interpreter, and the engine packages in use (dpkg on Debian 12, the private prefix on 13)
  {
    cat "$ROOT/scripts/setup.sh" "$ROOT/pyproject.toml" "$ROOT/setup.py" /etc/debian_version 2>/dev/null
    "$PY" -c 'import sys; print(sys.executable, sys.version)' 2>/dev/null || echo "no $PY"
    dpkg-query -W libopenems0 libcsxcad0 libnf2ff0 2>/dev/null || true
    cat "$MARKER" 2>/dev/null || true
  } | sha256sum | cut -c1-16
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
ARCH="$(dpkg --print-architecture)"
[[ "$ARCH" == amd64 ]] || die "unsupported architecture '$ARCH'; the engine set-up is written for amd64 only"
TRIPLET=x86_64-linux-gnu
PYEXT="cpython-311-$TRIPLET.so"

"$PY" -c 'import sys; assert sys.version_info[:2] == (3, 11), sys.version' 2>/dev/null \
  || die "$PY must be CPython 3.11 (the openEMS modules are CPython 3.11 extensions); set BODYSWEEP_PYTHON=/path/to/python3.11"

SUDO=""
if [[ "$(id -u)" != 0 ]]; then
  if command -v sudo >/dev/null && sudo -n true 2>/dev/null; then SUDO="sudo"; fi
fi
can_root() { [[ "$(id -u)" == 0 || -n "$SUDO" ]]; }

missing_pkgs() {
  local out=() p
  for p in "$@"; do
    dpkg-query -W -f='${Status}' "$p" 2>/dev/null | grep -q "install ok installed" || out+=("$p")
  done
  echo "${out[@]:-}"
}

apt_install() {
  local miss; miss="$(missing_pkgs "$@")"
  [[ -z "$miss" ]] && return 0
  can_root || die "missing Debian packages: $miss. Run as root or: sudo apt-get install --no-install-recommends $miss   then run this again"
  say "apt-get install $miss"
  $SUDO apt-get update -q -o DPkg::Lock::Timeout=300 >/dev/null || die "apt-get update failed"
  # shellcheck disable=SC2086
  $SUDO env DEBIAN_FRONTEND=noninteractive apt-get install "${APT_OPTS[@]}" $miss >/dev/null \
    || die "apt-get install $miss failed"
}

python_modules_ok() {
  # the extracted module folders are complete (both packages' main extension modules present)
  [[ -f "$ENGINE/py/CSXCAD/CSXCAD.$PYEXT" && -f "$ENGINE/py/openEMS/openEMS.$PYEXT" \
     && -f "$ENGINE/py/openEMS/_nf2ff.$PYEXT" && -f "$ENGINE/py/SmoothMeshLines.py" ]]
}

install_py_modules() {
  # $1: path to python3-openems .deb
  local tmp; tmp="$(mktemp -d)"
  dpkg-deb -x "$1" "$tmp"
  local dp="$tmp/usr/lib/python3/dist-packages"
  [[ -d "$dp/CSXCAD" && -d "$dp/openEMS" ]] || die "$(basename "$1") holds no CSXCAD/ and openEMS/ module folders"
  # copy next to the live folders, then swap by renaming (other users of .venv see no half folder)
  local m
  for m in CSXCAD openEMS; do
    rm -rf "$ENGINE/py/.new-$m" "$ENGINE/py/.old-$m"
    cp -r "$dp/$m" "$ENGINE/py/.new-$m"
  done
  for m in CSXCAD openEMS; do
    [[ -e "$ENGINE/py/$m" ]] && mv "$ENGINE/py/$m" "$ENGINE/py/.old-$m"
    mv "$ENGINE/py/.new-$m" "$ENGINE/py/$m"
    rm -rf "$ENGINE/py/.old-$m"
  done
  # CSXCAD's CSRectGrid imports SmoothMeshLines as a top-level module; provide it without its
  # plotting import (pylab is only used by a demo function there).
  sed 's/^import pylab as plt$/plt = None  # plotting import dropped by bodysweep set-up/' \
    "$dp/CSXCAD/SmoothMeshLines.py" > "$ENGINE/py/.SmoothMeshLines.py.new"
  mv "$ENGINE/py/.SmoothMeshLines.py.new" "$ENGINE/py/SmoothMeshLines.py"
  rm -rf "$tmp"
}

is_elf() { [[ "$(head -c 4 "$1" 2>/dev/null | od -An -c | tr -d ' \n')" == '177ELF' ]]; }

check_linkage() {
  # $@: extension modules. ldd (recursively) must resolve every library, and no symbol other than
  # the Python C API (provided by the interpreter at import) may stay undefined.
  local so bad=0 out
  for so in "$@"; do
    out="$(ldd -r "$so" 2>&1)" || { say "ldd failed for $so:"; echo "$out" >&2; bad=1; continue; }
    if grep -q "not found" <<<"$out"; then
      say "unresolved libraries for $so:"; grep "not found" <<<"$out" >&2; bad=1
    fi
    if grep "undefined symbol" <<<"$out" | grep -qvE "undefined symbol: _?Py"; then
      say "undefined symbols for $so:"; grep "undefined symbol" <<<"$out" | grep -vE "undefined symbol: _?Py" | head >&2; bad=1
    fi
  done
  return "$bad"
}

mkdir -p "$ENGINE/py" "$ENGINE/debs"

if [[ "$DEB_MAJOR" == 12 ]]; then
  apt_install libopenems0 libcsxcad0 libnf2ff0 ca-certificates
  OE_VER="$(dpkg-query -W -f='${Version}' libopenems0)"
  FROM="$ENGINE/py/.from-python3-openems_$OE_VER"
  if [[ ! -f "$FROM" ]] && python_modules_ok; then
    # modules extracted by an earlier version of this script: keep them if their .deb matches
    for d in "$ENGINE/debs"/python3-openems_*.deb; do
      [[ -f "$d" && "$(dpkg-deb -f "$d" Version)" == "$OE_VER" ]] && touch "$FROM"
    done
  fi
  if ! python_modules_ok || [[ ! -f "$FROM" ]]; then
    say "fetching python3-openems $OE_VER (modules only)"
    rm -f "$ENGINE/debs"/python3-openems_*.deb "$ENGINE/py"/.from-python3-openems_*
    dl_log="$ENGINE/debs/download.log"
    if ! (cd "$ENGINE/debs" && apt-get "${APT_SELF[@]}" download "python3-openems=$OE_VER") >"$dl_log" 2>&1; then
      # the package lists may be missing or older than the installed libopenems0
      can_root || { cat "$dl_log" >&2; die "apt-get download python3-openems=$OE_VER failed; run: sudo apt-get update   then run this again"; }
      say "refreshing the package lists and retrying"
      $SUDO apt-get update -q -o DPkg::Lock::Timeout=300 >/dev/null || die "apt-get update failed"
      (cd "$ENGINE/debs" && apt-get "${APT_SELF[@]}" download "python3-openems=$OE_VER") >"$dl_log" 2>&1 \
        || { cat "$dl_log" >&2; die "apt-get download python3-openems=$OE_VER failed (see above)"; }
    fi
    deb="$(ls "$ENGINE/debs"/python3-openems_*.deb 2>/dev/null | head -1)"
    [[ -n "$deb" ]] || { cat "$dl_log" >&2; die "apt-get download left no python3-openems .deb in $ENGINE/debs"; }
    install_py_modules "$deb"
    python_modules_ok || die "python3-openems $OE_VER did not provide the expected $PYEXT modules"
    touch "$FROM"
  fi
  ENGINE_VERSIONS="$(printf '{"openEMS": "%s", "CSXCAD": "%s"}' "$OE_VER" "$(dpkg-query -W -f='${Version}' libcsxcad0)")"
else
  apt_install "${TRIXIE_PKGS[@]}"
  APTDIR="$ENGINE/apt-bookworm"
  LIBDIR="$PREFIX/usr/lib/$TRIPLET"
  want_marker="packages: ${BOOKWORM_DEBS[*]}"
  # rebuild when never completed, made for another package list, or damaged since (ldd fails)
  if [[ ! -f "$MARKER" ]] || [[ "$(head -1 "$MARKER")" != "$want_marker" ]] || ! python_modules_ok \
     || ! check_linkage "$ENGINE"/py/*/*.so >/dev/null 2>&1; then
    t0=$SECONDS
    say "fetching bookworm openEMS .debs through a private apt configuration ($APTDIR)"
    rm -rf "$APTDIR" "$ENGINE/debs13" "$PREFIX"
    mkdir -p "$APTDIR/lists/partial" "$APTDIR/cache/archives/partial" "$APTDIR/sources.list.d" \
             "$APTDIR/preferences.d" "$ENGINE/debs13" "$PREFIX"
    keyring=/usr/share/keyrings/debian-archive-keyring.gpg
    [[ -f "$keyring" ]] || apt_install debian-archive-keyring
    cat > "$APTDIR/sources.list" <<SRC
deb [signed-by=$keyring] http://deb.debian.org/debian bookworm main
deb [signed-by=$keyring] http://deb.debian.org/debian-security bookworm-security main
SRC
    : > "$APTDIR/status"
    APT_PRIV=(-o "Dir::Etc::SourceList=$APTDIR/sources.list" -o "Dir::Etc::SourceParts=$APTDIR/sources.list.d"
              -o "Dir::State::Lists=$APTDIR/lists" -o "Dir::State::status=$APTDIR/status"
              -o "Dir::Cache=$APTDIR/cache" -o "Dir::Cache::archives=$APTDIR/cache/archives"
              -o "Dir::Etc::Preferences=$APTDIR/preferences" -o "Dir::Etc::PreferencesParts=$APTDIR/preferences.d"
              -o "APT::Architecture=$ARCH" -o "APT::Architectures=$ARCH" -o "Acquire::Languages=none"
              "${APT_SELF[@]}")
    apt-get "${APT_PRIV[@]}" update -q >"$APTDIR/update.log" 2>&1 \
      || { cat "$APTDIR/update.log" >&2; die "private apt-get update for bookworm failed (see above)"; }
    (cd "$ENGINE/debs13" && apt-get "${APT_PRIV[@]}" download "${BOOKWORM_DEBS[@]}") >"$APTDIR/download.log" 2>&1 \
      || { cat "$APTDIR/download.log" >&2; die "private apt-get download from bookworm failed (see above)"; }
    versions=()
    for p in "${BOOKWORM_DEBS[@]}"; do
      d="$(ls "$ENGINE/debs13/${p}_"*.deb 2>/dev/null | head -1)"
      [[ -n "$d" ]] || die "bookworm package $p was not downloaded into $ENGINE/debs13"
      dpkg-deb -x "$d" "$PREFIX"
      versions+=("$p=$(dpkg-deb -f "$d" Version)")
    done
    install_py_modules "$ENGINE/debs13/"python3-openems_*.deb
    # the prefix only needs the shared libraries; the Python modules live in .engine/py
    rm -rf "$PREFIX/usr/lib/python3" "$PREFIX/usr/share"
    # every private shared object and every extension module finds its private siblings through an
    # $ORIGIN-relative RUNPATH (trixie's own libraries are found in the default search path)
    say "setting RPATHs with patchelf"
    n=0
    while IFS= read -r so; do
      is_elf "$so" || continue
      rel="$(realpath --relative-to="$(dirname "$so")" "$LIBDIR")"; [[ "$rel" == . ]] && rel=""
      # shellcheck disable=SC2016
      patchelf --set-rpath '$ORIGIN'"${rel:+/$rel}" "$so" || die "patchelf failed on $so"
      n=$((n + 1))
    done < <(find "$PREFIX/usr/lib" "$ENGINE/py" -name '*.so*' -type f)
    say "patched $n shared objects"
    mods=("$ENGINE"/py/*/*.so)
    check_linkage "${mods[@]}" \
      || die "some libraries of the bookworm openEMS are missing on this system (see above); install the trixie packages that provide them"
    # the private libraries must come from the prefix, not from somewhere else that happens to match
    for lib in libopenEMS.so.0 libCSXCAD.so.0 libnf2ff.so.0 libhdf5_serial.so.103 libboost_thread.so.1.74.0 libjsoncpp.so.25; do
      where="$(ldd "${mods[@]}" | awk -v l="$lib" '$1 == l {print $3}' | xargs -r realpath | sort -u)"
      [[ -n "$where" && "$where" == "$PREFIX/"* ]] || die "$lib resolves to '${where:-nothing}', expected a file in $PREFIX"
    done
    { echo "$want_marker"; printf '%s\n' "${versions[@]}"; } > "$MARKER.tmp" && mv "$MARKER.tmp" "$MARKER"
    # the bookworm package lists, apt's caches and the .debs are not needed any more (about 140 MB)
    rm -rf "$APTDIR/lists" "$APTDIR/cache" "$ENGINE/debs13"
    say "private engine prefix ready ($(du -sh "$PREFIX" | cut -f1), $((SECONDS - t0)) s)"
  fi
  mver() { sed -n "s/^$1=//p" "$MARKER"; }
  ENGINE_VERSIONS="$(printf '{"openEMS": "%s", "CSXCAD": "%s"}' "$(mver libopenems0)" "$(mver libcsxcad0)")"
fi

if [[ -x "$VENV/bin/python" ]] && ! "$VENV/bin/python" -c 'import sys; assert sys.version_info[:2] == (3, 11)' 2>/dev/null; then
  say "existing .venv does not run CPython 3.11; recreating it"
  rm -rf "$VENV"
fi
if [[ ! -x "$VENV/bin/python" ]]; then
  say "creating .venv from $("$PY" -c 'import sys; print(sys.executable)')"
  "$PY" -m venv "$VENV"
fi
say "installing bodysweep (editable, with test extras) into .venv"
"$VENV/bin/python" -m pip install -q --disable-pip-version-check -e "$ROOT[test]" 2> >(grep -vE "Location '.*' is ignored" >&2)
SITE="$("$VENV/bin/python" -c 'import sysconfig; print(sysconfig.get_paths()["purelib"])')"
echo "$ENGINE/py" > "$SITE/bodysweep_openems.pth"

"$VENV/bin/python" - <<'PYCHECK'
import CSXCAD, openEMS, numpy
from CSXCAD import ContinuousStructure
from openEMS import openEMS as _engine
import bodysweep.workflow
print(f"[setup] openEMS modules import with numpy {numpy.__version__}")
PYCHECK
# engine versions (read by `bodysweep --version`)
echo "$ENGINE_VERSIONS" > "$ENGINE/py/bodysweep_engine_versions.json"
rm -f "$ENGINE"/.stamp-*
touch "$ENGINE/.stamp-$(stamp_key)"
say "done"
