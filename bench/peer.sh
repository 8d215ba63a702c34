#!/usr/bin/env bash
# Side-by-side speed of the symtrust trainer (Candle, stock CPU kernels) and
# PyTorch on the same machine, the same architecture and the same kind of data,
# both limited to 2 threads. Writes reports/bench/trainer.md.
#
#   bench/peer.sh                 # installs PyTorch into a throwaway venv
#   PEER_TORCH_VENV=DIR bench/peer.sh   # reuse a venv that already has torch
#
# PyTorch comes from PyPI (the only index reachable here); its Linux wheel
# depends on the NVIDIA CUDA wheels, so the throwaway venv is ~5 GiB. torch
# imports and runs on the CPU without a GPU.
set -euo pipefail
cd "$(dirname "$0")/.."
export RAYON_NUM_THREADS=2 OMP_NUM_THREADS=2 MKL_NUM_THREADS=2

A1_W=6622 A1_H=4677        # ISO A1 (594 x 841 mm) at 200 dpi, landscape
A0_W=14043 A0_H=9933       # ISO A0 (841 x 1189 mm) at 300 dpi, landscape
TRAIN_STEPS_OURS=${TRAIN_STEPS_OURS:-6}
TRAIN_STEPS_TORCH=${TRAIN_STEPS_TORCH:-20}
SUBSET=${SUBSET:-256}

tmp=$(mktemp -d)
cleanup() { rm -rf "$tmp"; }
trap cleanup EXIT

if [[ -n "${PEER_TORCH_VENV:-}" ]]; then
  py="$PEER_TORCH_VENV/bin/python"
else
  python3 -m venv "$tmp/venv"
  "$tmp/venv/bin/pip" install -q "torch==${TORCH_VERSION:-2.15.0}"
  py="$tmp/venv/bin/python"
fi

cargo build -q --release -p symtrust-trainer --example peer_bench
ours=target/release/examples/peer_bench

echo "ours: training" >&2
o_train=$("$ours" train 100 64 "$TRAIN_STEPS_OURS")
echo "torch: training" >&2
t_train=$("$py" bench/peer_torch.py train 100 64 "$TRAIN_STEPS_TORCH" 2>/dev/null)
echo "ours: A1 sweep" >&2
o_sweep=$("$ours" sweep $A1_W $A1_H 8 "$SUBSET")
echo "torch: A1 sweep" >&2
t_sweep=$("$py" bench/peer_torch.py sweep $A1_W $A1_H 8 "$SUBSET" 2>/dev/null)
echo "ours: A0 memory" >&2
o_mem=$("$ours" memory $A0_W $A0_H 8)

printf '%s\n' "$o_train" "$t_train" "$o_sweep" "$t_sweep" "$o_mem" > "$tmp/results.jsonl"
mkdir -p reports/bench
"$py" - "$tmp/results.jsonl" > reports/bench/trainer.md <<'PY'
import json, platform, subprocess, sys
rows = [json.loads(l) for l in open(sys.argv[1])]
o_train, t_train, o_sweep, t_sweep, o_mem = rows
def sh(cmd):
    try:
        return subprocess.run(cmd, shell=True, capture_output=True, text=True).stdout.strip()
    except Exception:
        return "?"
cpu = sh("grep -m1 'model name' /proc/cpuinfo | cut -d: -f2").strip()
print("# Trainer benchmark: symtrust (Candle) beside PyTorch\n")
print("Written by `bench/peer.sh`. Same machine, same default architecture (convolutions 16/32/64,")
print("kernels 5/5/3, 2x2 max pooling, hidden 128, 4 classes, 100 x 100 window), both sides limited")
print("to 2 threads. A benchmark, not a test: figures vary with the machine and its load.\n")
print(f"- machine: {cpu}, {sh('nproc')} logical CPUs visible, {platform.system()} {platform.release()}")
print(f"- symtrust: candle-core 0.11.1 stock CPU kernels (gemm crate, no MKL), {sh('rustc --version')}")
print(f"- PyTorch: {t_train['torch']} (CPU), Python {platform.python_version()}")
print(f"- load average when the report was written: {' '.join(open('/proc/loadavg').read().split()[:3])}\n")
print("| figure | symtrust | PyTorch | PyTorch / symtrust |")
print("|---|---|---|---|")
print(f"| training samples/s (batch 64, AdamW) | {o_train['samples_per_s']:.1f} | {t_train['samples_per_s']:.1f} | {t_train['samples_per_s']/o_train['samples_per_s']:.1f}x |")
print(f"| A1 200 dpi sweep, stride 8, fully convolutional (s) | {o_sweep['sweep_seconds']:.1f} | {t_sweep['sweep_seconds']:.1f} | {o_sweep['sweep_seconds']/t_sweep['sweep_seconds']:.1f}x |")
print(f"| per-window classification (ms/window, {o_sweep['per_window_subset']} windows) | {1000*o_sweep['per_window_seconds']:.2f} | {1000*t_sweep['per_window_seconds']:.2f} | {o_sweep['per_window_seconds']/t_sweep['per_window_seconds']:.1f}x |")
print(f"| A1 sweep per window, extrapolated to all {o_sweep['cells']} cells (s) | {o_sweep['per_window_full_seconds_est']:.0f} | {t_sweep['per_window_full_seconds_est']:.0f} | |")
print(f"| fully-convolutional speed-up over per-window | {o_sweep['ratio']:.1f}x | {t_sweep['ratio']:.1f}x | |")
print()
print(f"Peak memory (VmHWM) of the A1 sweep process: {o_sweep['peak_rss_mib']:.0f} MiB.")
print(f"A0 at 300 dpi ({o_mem['width']} x {o_mem['height']}, {o_mem['cells']} cells at stride 8): "
      f"{o_mem['seconds']:.0f} s, peak resident memory {o_mem['peak_rss_mib']:.0f} MiB "
      f"(of which {o_mem['peak_rss_mib_before_sweep']:.0f} MiB before the sweep: the sheet and the binary).\n")
print("Multiply-accumulates per window classified on its own: "
      f"{o_sweep['macs_per_window']/1e6:.1f} M; the sweep needs about 1.1 M per cell at stride 8, because the")
print("hidden layer (6400 x 128 weights per window position) cannot be shared between positions: a")
print("saving of about 33x in arithmetic. The measured speed-up is larger on both sides because")
print("per-window batches run the early convolutions on many small images, less efficiently per")
print("multiply-accumulate than one pass over large tiles. The A1 sweep's peak memory includes the")
print("per-window comparison run in the same process.\n")
print("Raw results (JSON lines):\n")
print("```")
for r in rows:
    print(json.dumps(r))
print("```")
PY
echo "wrote reports/bench/trainer.md" >&2
