# Shared by the scripts of this folder: starting `shearbox serve` on a free loopback port and
# stopping it, and the contract fuzzer's virtual environment. Sourced, not run; needs $bin (the
# shearbox binary) and $work (a scratch folder).

server_pid=""

# start_server CONFIG: serves CONFIG on 127.0.0.1 (a free port), logging to $work/serve.log;
# sets $server_pid and $base (http://127.0.0.1:PORT) once the service answers /readyz.
start_server() {
    SHEARBOX_LOG=info "$bin" serve --config "$1" --bind 127.0.0.1:0 2>"$work/serve.log" &
    server_pid=$!
    local addr=""
    for _ in $(seq 1 600); do
        addr=$(sed -n 's/.*listening on http:\/\/\([0-9.:]*\).*/\1/p' "$work/serve.log" | head -n1)
        [ -n "$addr" ] && break
        kill -0 "$server_pid" 2>/dev/null || { cat "$work/serve.log" >&2; return 1; }
        sleep 0.1
    done
    [ -n "$addr" ] || { echo "the service did not start" >&2; cat "$work/serve.log" >&2; return 1; }
    base="http://$addr"
    curl -fsS "$base/readyz" >/dev/null
}

# stop_server: SIGTERM, then waits; fails unless the service exited cleanly.
stop_server() {
    [ -n "$server_pid" ] || return 0
    local pid=$server_pid status=0
    server_pid=""
    kill -TERM "$pid" 2>/dev/null || true
    wait "$pid" || status=$?
    return "$status"
}

# ensure_service_venv: target/service-venv holds exactly the pins of requirements.txt (pip is
# not called when they are installed); sets $service_py.
ensure_service_venv() {
    local root reqs venv
    root="$(cd "$(dirname "${BASH_SOURCE[0]}")/../.." && pwd)"
    reqs="$root/tests/service/requirements.txt"
    venv="$root/target/service-venv"
    . "$root/scripts/lib.sh"
    ensure_pinned_venv "$venv" "$reqs"
    service_py="$py"
}
