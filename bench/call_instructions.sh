#!/usr/bin/env bash
# Server CPU per unary call, counted in instructions (user space) under valgrind's callgrind:
# deterministic to about 1 %, where timings on a shared 2-core machine move by 20 % between
# runs. The server is started under callgrind with instrumentation off, warmed up with 2,000
# IsentropicRatios calls (Mach 2) from h2load, then 20,000 calls are counted.
#
# Usage (from the repository root; needs valgrind and h2load, Debian packages valgrind and
# nghttp2-client, and target/capacity-request.bin, which bench/capacity.py writes):
#   bench/call_instructions.sh target/release/jetloop-server --listen ADDR
#   bench/call_instructions.sh target/release/bench-echo-server ADDR
# ADDR in the command is replaced by the address the server is given.
set -euo pipefail
port=${PORT:-50990}
addr=127.0.0.1:$port
body=target/capacity-request.bin
out=$(mktemp -d)
cmd=()
for a in "$@"; do cmd+=("${a//ADDR/$addr}"); done
valgrind --tool=callgrind --instr-atstart=no --callgrind-out-file="$out/cg.out" "${cmd[@]}" >"$out/log" 2>&1 &
vg=$!
for _ in $(seq 100); do ss -ltn | grep -q ":$port " && break; sleep 0.2; done
url=http://$addr/jetloop.v1.GasDynamicsService/IsentropicRatios
load() {
  h2load -n "$1" -c 4 -m 16 -t 1 -d "$body" -H 'content-type: application/grpc' -H 'te: trailers' "$url" |
    grep -E "succeeded"
}
load 2000 >/dev/null
callgrind_control -i on "$vg" >/dev/null 2>&1
load 20000
callgrind_control -i off "$vg" >/dev/null 2>&1
# Asked to stop (jetloop drains and exits); a server without a handler is ended after 10 s.
kill -INT "$vg"
for _ in $(seq 50); do kill -0 "$vg" 2>/dev/null || break; sleep 0.2; done
kill -TERM "$vg" 2>/dev/null || true
wait "$vg" || true
ir=$(grep -oP "Collected : \K\d+" "$out/log")
echo "$1: $((ir / 20000)) instructions per call (user space, 20,000 calls)"
rm -rf "$out"
