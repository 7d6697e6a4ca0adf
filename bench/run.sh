#!/usr/bin/env bash
# Benchmark suite of trapwise: speed against the FFT floor and against a lab-style numpy/scipy
# reference on the same files, statistical efficiency against the Cramer-Rao bound, peak memory,
# and loopback service throughput. Writes JSON and a markdown summary to bench/results/.
#
# Usage: bench/run.sh [--quick]
#   --quick   small records, 60 seeds, a dozen uploads (about two minutes)
# Environment: CARGO_TARGET_DIR (default target), RESULTS (default bench/results).
#
# numpy and scipy are installed with pip and hyperfine with apt-get when missing.
# OPENBLAS_CORETYPE and OPENBLAS_L2_SIZE, set on some machines here for old OpenBLAS builds,
# slow a current numpy: they are unset for the commands that run the reference script only.
set -euo pipefail

QUICK=0
[[ "${1:-}" == "--quick" ]] && QUICK=1
ROOT="$(cd "$(dirname "$0")/.." && pwd)"
TARGET="${CARGO_TARGET_DIR:-$ROOT/target}"
RESULTS="${RESULTS:-$ROOT/bench/results}"
BIN="$TARGET/release/trapwise"
PY=(env -u OPENBLAS_CORETYPE -u OPENBLAS_L2_SIZE python3)
mkdir -p "$RESULTS"
WORK="$(mktemp -d)"
SERVE_PID=""
cleanup() {
    if [[ -n "$SERVE_PID" ]]; then kill "$SERVE_PID" 2>/dev/null || true; fi
    rm -rf "$WORK"
}
trap cleanup EXIT

# --- tools -------------------------------------------------------------------------------
python3 -c 'import numpy, scipy' 2>/dev/null || python3 -m pip install --quiet numpy scipy
command -v hyperfine >/dev/null || { apt-get update -qq && apt-get install -y -qq hyperfine; }
[[ -x /usr/bin/time ]] || { apt-get update -qq && apt-get install -y -qq time; }

echo "== build" >&2
(cd "$ROOT" && cargo build --release --quiet --bin trapwise --example speed --example efficiency)

# --- machine -----------------------------------------------------------------------------
python3 - "$RESULTS/machine.json" <<'EOF'
import json, os, platform, subprocess, sys
cpu = next((l.split(":", 1)[1].strip() for l in open("/proc/cpuinfo") if l.startswith("model name")), "?")
import numpy, scipy
json.dump({
    "nproc": os.cpu_count(),
    "cpu": cpu,
    "load_at_start": open("/proc/loadavg").read().split()[:3],
    "kernel": platform.release(),
    "rustc": subprocess.run(["rustc", "--version"], capture_output=True, text=True).stdout.strip(),
    "numpy": numpy.__version__, "scipy": scipy.__version__,
    "hyperfine": subprocess.run(["hyperfine", "--version"], capture_output=True, text=True).stdout.strip(),
}, open(sys.argv[1], "w"), indent=1)
EOF

# --- 1. in-process speed: parse, calibrate, FFT floor --------------------------------------
echo "== speed (in process)" >&2
if (( QUICK )); then "$TARGET/release/examples/speed" --quick > "$RESULTS/speed.jsonl"
else "$TARGET/release/examples/speed" > "$RESULTS/speed.jsonl"; fi

# --- 2. end to end on files: trapwise CLI and the reference script -------------------------
echo "== end to end" >&2
if (( QUICK )); then LOG2S=(16 18 20); REF_MAX=20; else LOG2S=(16 18 20 22 24); REF_MAX=22; fi
: > "$RESULTS/end_to_end.jsonl"
for L in "${LOG2S[@]}"; do
    N=$((1 << L))
    DUR=$(python3 -c "print($N / 50000)")
    for FMT in csv npy f32; do
        F="$WORK/r$L.$FMT"
        "$BIN" simulate -o "$F" --duration "$DUR" --seed "$L" --stiffness 0.05 >/dev/null 2>&1
        CAL=("$BIN" calibrate "$F" --json --no-plots --bead-diameter 1 --temperature 25 --sample-rate 50000 --units nm)
        RUNS=$(( L >= 22 ? 3 : 5 ))
        hyperfine --style none --warmup 1 --runs "$RUNS" --export-json "$WORK/hf.json" \
            "${CAL[*]} >/dev/null" >/dev/null 2>&1
        TW_S=$(python3 -c "import json;print(json.load(open('$WORK/hf.json'))['results'][0]['median'])")
        PEAK_KIB=$( { /usr/bin/time -f "%M" "${CAL[@]}" > "$WORK/tw.json"; } 2>&1 | tail -1)
        REF_S=null; REF_JSON=null
        if (( L <= REF_MAX )); then
            REF=("${PY[@]}" "$ROOT/bench/reference.py" calibrate "$F" --truth "$F.truth.json")
            hyperfine --style none --runs "$(( L >= 22 ? 2 : 3 ))" --export-json "$WORK/hf.json" \
                "${REF[*]} >/dev/null" >/dev/null 2>&1
            REF_S=$(python3 -c "import json;print(json.load(open('$WORK/hf.json'))['results'][0]['median'])")
            REF_JSON=$("${REF[@]}")
        fi
        python3 - "$F" "$L" "$FMT" "$TW_S" "$PEAK_KIB" "$REF_S" "$REF_JSON" "$WORK/tw.json" \
            >> "$RESULTS/end_to_end.jsonl" <<'EOF'
import json, os, sys
f, l, fmt, tw_s, peak, ref_s, ref_json, tw_path = sys.argv[1:]
truth = json.load(open(f + ".truth.json"))["axes"][0]
tw = json.load(open(tw_path))["axes"][0]
n = 1 << int(l)
out = {
    "log2_n": int(l), "format": fmt, "file_bytes": os.path.getsize(f),
    "trapwise_median_s": float(tw_s),
    "trapwise_peak_rss_kib": int(peak),
    "peak_rss_over_samples_f64": int(peak) * 1024 / (8 * n),
    "trapwise_fc_rel_error": tw["corner_frequency_hz"]["value"] / truth["corner_frequency_hz"] - 1,
    "trapwise_fc_se_rel": tw["corner_frequency_hz"]["se"] / truth["corner_frequency_hz"],
    "trapwise_kappa_rel_error": {m: tw["stiffness_pn_per_nm"][m]["value"] / truth["stiffness_pn_per_nm"] - 1
                                 for m in ("psd", "acf", "equipartition", "consensus")},
}
if ref_s != "null":
    ref = json.loads(ref_json)
    out["reference_median_s"] = float(ref_s)
    out["ratio_reference_to_trapwise"] = float(ref_s) / float(tw_s)
    out["reference_axis"] = ref["axes"][0]
print(json.dumps(out))
EOF
        echo "   2^$L $FMT done" >&2
    done
done

# --- 3. statistical efficiency -------------------------------------------------------------
echo "== efficiency" >&2
SEEDS=$(( QUICK ? 60 : 400 ))
"$TARGET/release/examples/efficiency" --seeds "$SEEDS" > "$RESULTS/efficiency.jsonl"
: > "$RESULTS/reference_efficiency.jsonl"
for S in "500 131072" "12500 131072" "950 16384"; do
    set -- $S
    "${PY[@]}" "$ROOT/bench/reference.py" efficiency --fc "$1" --n "$2" --seeds "$SEEDS" \
        >> "$RESULTS/reference_efficiency.jsonl"
done

# --- 4. service throughput on loopback -----------------------------------------------------
echo "== service throughput" >&2
PORT=$(python3 -c 'import socket;s=socket.socket();s.bind(("127.0.0.1",0));print(s.getsockname()[1])')
for i in 1 2 3 4; do
    "$BIN" simulate -o "$WORK/u$i.f32" --duration 20.97152 --seed $((100 + i)) >/dev/null 2>&1
done
TRAPWISE_DATA_DIR="$WORK/serve" RUST_LOG=warn "$BIN" serve --bind "127.0.0.1:$PORT" \
    > "$WORK/serve.log" 2>&1 &
SERVE_PID=$!
for _ in $(seq 1 100); do
    python3 -c "import urllib.request;urllib.request.urlopen('http://127.0.0.1:$PORT/healthz',timeout=1)" \
        2>/dev/null && break
    sleep 0.2
done
COUNT=$(( QUICK ? 12 : 60 ))
: > "$RESULTS/throughput.jsonl"
for C in 1 4; do
    python3 "$ROOT/bench/throughput.py" --port "$PORT" --files "$WORK"/u?.f32 --count "$COUNT" \
        --concurrency "$C" --limit 180 --pid "$SERVE_PID" --run-id "c$C" >> "$RESULTS/throughput.jsonl"
done
kill "$SERVE_PID" && wait "$SERVE_PID" 2>/dev/null || true
SERVE_PID=""

python3 - "$RESULTS/machine.json" <<'EOF'
import json, sys
m = json.load(open(sys.argv[1])); m["load_at_end"] = open("/proc/loadavg").read().split()[:3]
json.dump(m, open(sys.argv[1], "w"), indent=1)
EOF
python3 "$ROOT/bench/summarize.py" "$RESULTS" > "$RESULTS/summary.md"
cat "$RESULTS/summary.md"
