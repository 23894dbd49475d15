# Shell helpers the ci/ install scripts share; source it after defining `log`.

# Runs a command with its output kept in a log that is shown only if it fails.
quietly() {
    local out
    out="$(mktemp)"
    if ! "$@" >"$out" 2>&1; then
        cat "$out" >&2
        rm -f "$out"
        log "failed: $*"
        return 1
    fi
    rm -f "$out"
}

# Runs a command as root: directly, or through sudo.
as_root() {
    if [ "$(id -u)" -eq 0 ]; then
        "$@"
    elif command -v sudo >/dev/null 2>&1; then
        sudo "$@"
    else
        log "need root to run: $*"
        return 1
    fi
}
