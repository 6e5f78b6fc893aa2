# shellcheck shell=bash
# Shared set-up for scripts/run and scripts/test. Source it, do not execute it.
#
#   RTVOICE_EXTRA=test source scripts/_setup.sh   # installs rtvoice[test]
#
# Idempotent and quiet when nothing needs doing:
#   1. Debian packages (PortAudio, JACK, jack_capture, tmux): installed when root, else a hint.
#   2. .venv in the repo, created with the first Python >= 3.11 found, only if missing.
#   3. `pip install -e .[extra]` only when pyproject.toml changed since the last install
#      (stamp file inside .venv).
#   4. A one-line hint when sounddevice cannot load the PortAudio library.
# Sets REPO_ROOT, VENV and exports OPENBLAS_NUM_THREADS=1.

REPO_ROOT="$(cd "$(dirname "${BASH_SOURCE[0]}")/.." && pwd)"
VENV="$REPO_ROOT/.venv"
RTVOICE_EXTRA="${RTVOICE_EXTRA:-}"
# One BLAS thread: the audio process must not compete with BLAS worker threads.
export OPENBLAS_NUM_THREADS=1

_RTV_DEB_PKGS=(libportaudio2 jackd2 jack-tools jack-capture tmux)
_RTV_DEBCONF='jackd2 jackd/tweak_rt_limits boolean false'

_rtv_say() { printf '[setup] %s\n' "$*" >&2; }
_rtv_die() { printf '[setup] ERROR: %s\n' "$*" >&2; exit 1; }

# Print the names of the given Debian packages that are not installed.
_rtv_missing_debs() {
    local pkg
    for pkg in "$@"; do
        if [[ "$(dpkg-query -W -f='${Status}' "$pkg" 2>/dev/null)" != *"ok installed"* ]]; then
            printf '%s\n' "$pkg"
        fi
    done
}

# Install Debian packages as root; `apt-get update` only when the lists are empty or
# the first attempt fails (mirrors may be the only network).
_rtv_apt_install() {
    local log="${TMPDIR:-/tmp}/rtvoice-apt.log"
    local cmd=(apt-get install -y --no-install-recommends "$@")
    _rtv_say "installing Debian packages: $* (log: $log)"
    echo "$_RTV_DEBCONF" | debconf-set-selections
    : >"$log"
    if ! compgen -G '/var/lib/apt/lists/*_Packages*' >/dev/null; then
        apt-get update >>"$log" 2>&1 || true
    fi
    if ! DEBIAN_FRONTEND=noninteractive "${cmd[@]}" </dev/null >>"$log" 2>&1; then
        apt-get update >>"$log" 2>&1 || true
        if ! DEBIAN_FRONTEND=noninteractive "${cmd[@]}" </dev/null >>"$log" 2>&1; then
            tail -n 15 "$log" >&2
            _rtv_die "apt-get install failed (full log: $log)"
        fi
    fi
}

_rtv_ensure_debs() {
    command -v dpkg-query >/dev/null 2>&1 || return 0   # not Debian: nothing we can check
    local missing
    mapfile -t missing < <(_rtv_missing_debs "${_RTV_DEB_PKGS[@]}")
    ((${#missing[@]})) || return 0
    if [[ "$(id -u)" == 0 ]]; then
        _rtv_apt_install "${missing[@]}"
    else
        _rtv_say "missing Debian packages: ${missing[*]}; install them with:"
        printf "  sudo sh -c \"echo '%s' | debconf-set-selections; DEBIAN_FRONTEND=noninteractive apt-get install -y --no-install-recommends %s\"\n" \
            "$_RTV_DEBCONF" "${missing[*]}" >&2
    fi
}

# Succeeds when "$1" is a Python >= 3.11 with the venv module.
_rtv_python_ok() {
    "$1" -c 'import sys, venv; sys.exit(sys.version_info < (3, 11))' >/dev/null 2>&1
}

_rtv_find_python() {
    local cand
    for cand in python3.11 python3 python3.13 python3.12; do
        if command -v "$cand" >/dev/null 2>&1 && _rtv_python_ok "$cand"; then
            command -v "$cand"
            return 0
        fi
    done
    return 1
}

_rtv_can_apt() { [[ "$(id -u)" == 0 ]] && command -v apt-get >/dev/null 2>&1; }

_rtv_ensure_venv() {
    if [[ -x "$VENV/bin/python" && -x "$VENV/bin/pip" ]] && "$VENV/bin/python" -c "" >/dev/null 2>&1; then
        return 0
    fi
    local py
    if ! py="$(_rtv_find_python)"; then
        # A bare Debian may lack Python 3; fix that when we can.
        _rtv_can_apt && _rtv_apt_install python3 python3-venv
        py="$(_rtv_find_python)" || _rtv_die "no Python >= 3.11 found" \
            "(tried python3.11, python3, python3.13, python3.12); install python3 and python3-venv"
    fi
    local version
    version="$("$py" -c 'import platform; print(platform.python_version())')"
    _rtv_say "creating .venv with $py ($version)"
    rm -rf "$VENV"
    if ! "$py" -m venv "$VENV" >/dev/null 2>&1; then
        rm -rf "$VENV"
        # Debian ships ensurepip (needed by venv) in python3-venv / python3.X-venv.
        _rtv_can_apt || _rtv_die "'$py -m venv' failed; install python3-venv (Debian) and rerun"
        _rtv_apt_install python3-venv "python${version%.*}-venv"
        "$py" -m venv "$VENV" || _rtv_die "'$py -m venv $VENV' failed"
    fi
}

# Reinstall only when pyproject.toml changed. The stamp holds "<sha256> <extra>" lines,
# one per extra installed against that pyproject.toml; "base" means no extra.
_rtv_ensure_install() {
    local stamp="$VENV/.rtvoice-install-stamp"
    local want="${RTVOICE_EXTRA:-base}"
    local hash
    hash="$(sha256sum "$REPO_ROOT/pyproject.toml" | cut -d' ' -f1)"
    if [[ -f "$stamp" ]]; then
        if grep -qx "$hash $want" "$stamp"; then return 0; fi
        # Any extra installed against this pyproject.toml includes the base install.
        if [[ "$want" == base ]] && grep -q "^$hash " "$stamp"; then return 0; fi
    fi
    local spec="."
    [[ "$want" == base ]] || spec=".[$want]"
    local log="$VENV/pip-install.log"
    local t0=$SECONDS
    _rtv_say "pip install -e '$spec' (pyproject.toml changed or first run; log: .venv/pip-install.log)"
    if ! (cd "$REPO_ROOT" && "$VENV/bin/python" -m pip install -q -e "$spec") </dev/null >"$log" 2>&1; then
        tail -n 20 "$log" >&2
        _rtv_die "pip install -e '$spec' failed (full log: $log)"
    fi
    _rtv_say "installed in $((SECONDS - t0)) s"
    if [[ -f "$stamp" ]] && grep -q "^$hash " "$stamp"; then
        echo "$hash $want" >>"$stamp"
    else
        echo "$hash $want" >"$stamp"
    fi
}

# `import sounddevice` raises OSError when libportaudio2 is missing.
_rtv_check_portaudio() {
    "$VENV/bin/python" - <<'PY' >&2 || true
try:
    import sounddevice  # noqa: F401
except OSError:
    print("[setup] sounddevice cannot load the PortAudio library;"
          " install it: apt-get install libportaudio2")
except ImportError as exc:
    print(f"[setup] sounddevice is not importable ({exc}); rerun after fixing the install")
PY
}

# Two set-ups of one checkout at once (e.g. run and test) would race on apt and pip.
if command -v flock >/dev/null 2>&1; then
    exec {_rtv_lock_fd}>"${TMPDIR:-/tmp}/rtvoice-setup-$(printf %s "$REPO_ROOT" | sha256sum | cut -c1-12).lock"
    flock -w 900 "$_rtv_lock_fd" || _rtv_die "another set-up of $REPO_ROOT is still running"
fi
_rtv_ensure_debs
_rtv_ensure_venv
_rtv_ensure_install
if [[ -n "${_rtv_lock_fd:-}" ]]; then
    exec {_rtv_lock_fd}>&-
    unset _rtv_lock_fd
fi
_rtv_check_portaudio
