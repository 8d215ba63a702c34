#!/usr/bin/env bash
# Side-by-side speed of the symtrust trainer (Candle with symtrust's own CPU
# kernels, trainer/src/kernels) and PyTorch on the same machine, the same
# architecture and the same kind of data, both limited to 2 threads. Writes
# reports/bench/trainer.md.
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
TRAIN_STEPS_OURS=${TRAIN_STEPS_OURS:-20}
TRAIN_STEPS_TORCH=${TRAIN_STEPS_TORCH:-20}
SUBSET=${SUBSET:-256}
load_before=$(cut -d' ' -f1-3 /proc/loadavg)

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

# Training alternates the two sides twice and keeps each side's faster run, so
# a burst of load from other users of the cores does not land on one side only.
o_train=() t_train=()
for round in 1 2; do
  echo "ours: training ($round)" >&2
  o_train+=("$("$ours" train 100 64 "$TRAIN_STEPS_OURS")")
  echo "torch: training ($round)" >&2
  t_train+=("$("$py" bench/peer_torch.py train 100 64 "$TRAIN_STEPS_TORCH" 2>/dev/null)")
done
echo "ours: A1 sweep" >&2
o_sweep=$("$ours" sweep $A1_W $A1_H 8 "$SUBSET")
echo "torch: A1 sweep" >&2
t_sweep=$("$py" bench/peer_torch.py sweep $A1_W $A1_H 8 "$SUBSET" 2>/dev/null)
echo "ours: A1 plant sheet, dense and skipping blank paper" >&2
o_plant=$("$ours" plant 200 8)
echo "ours: kernels" >&2
o_kern=$("$ours" kernels)
echo "ours: A0 memory" >&2
o_mem=$("$ours" memory $A0_W $A0_H 8)

printf '%s\n' "${o_train[@]}" "${t_train[@]}" "$o_sweep" "$t_sweep" "$o_plant" "$o_kern" "$o_mem" > "$tmp/results.jsonl"
export LOAD_BEFORE="$load_before"
mkdir -p reports/bench
"$py" - "$tmp/results.jsonl" > reports/bench/trainer.md <<'PY'
import json, os, platform, subprocess, sys
rows = [json.loads(l) for l in open(sys.argv[1])]
o_runs, t_runs = rows[0:2], rows[2:4]
o_sweep, t_sweep, o_plant, o_kern, o_mem = rows[4:]
o_train = max(o_runs, key=lambda r: r["samples_per_s"])
t_train = max(t_runs, key=lambda r: r["samples_per_s"])
def sh(cmd):
    try:
        return subprocess.run(cmd, shell=True, capture_output=True, text=True).stdout.strip()
    except Exception:
        return "?"
cpu = sh("grep -m1 'model name' /proc/cpuinfo | cut -d: -f2").strip()
load_after = " ".join(open("/proc/loadavg").read().split()[:3])
print("# Trainer benchmark: symtrust (Candle + own CPU kernels) beside PyTorch\n")
print("Written by `bench/peer.sh`. Same machine, same default architecture (convolutions 16/32/64,")
print("kernels 5/5/3, 2x2 max pooling, hidden 128, 4 classes, 100 x 100 window), both sides limited")
print("to 2 threads. A benchmark, not a test: figures vary with the machine and its load.\n")
print(f"- machine: {cpu}, {sh('nproc')} logical CPUs visible, {platform.system()} {platform.release()}")
print(f"- symtrust: candle-core 0.11.1 with the convolution stack on symtrust's custom ops (im2col + `gemm` 0.19 crate), {sh('rustc --version')}")
print(f"- PyTorch: {t_train['torch']} (CPU), Python {platform.python_version()}")
print(f"- load average (1, 5, 15 min) before the run: {os.environ.get('LOAD_BEFORE', '?')}; after: {load_after}."
      " The two cores are shared with other engineers' builds, so both columns are slowed by the same load.\n")
def x(a, b):
    return f"{a / b:.2f}x"
print("| figure | symtrust | PyTorch | symtrust speed-up over PyTorch |")
print("|---|---|---|---|")
print(f"| training samples/s (batch 64, AdamW; faster of two alternated runs each; ours includes augmentation and one validation pass) | {o_train['samples_per_s']:.1f} | {t_train['samples_per_s']:.1f} | {x(o_train['samples_per_s'], t_train['samples_per_s'])} |")
print(f"| A1 200 dpi dense sweep, stride 8, random line work (s) | {o_sweep['sweep_seconds']:.1f} | {t_sweep['sweep_seconds']:.1f} | {x(t_sweep['sweep_seconds'], o_sweep['sweep_seconds'])} |")
print(f"| A1 200 dpi synthetic-plant sheet, dense (s) | {o_plant['dense_seconds']:.1f} | (dense cost does not depend on content: {t_sweep['sweep_seconds']:.1f}) | {x(t_sweep['sweep_seconds'], o_plant['dense_seconds'])} |")
print(f"| A1 200 dpi synthetic-plant sheet, skipping blank paper (s) | {o_plant['skip_seconds']:.1f} | dense {t_sweep['sweep_seconds']:.1f} | {x(t_sweep['sweep_seconds'], o_plant['skip_seconds'])} |")
print(f"| per-window classification (ms/window, {o_sweep['per_window_subset']} windows) | {1000*o_sweep['per_window_seconds']:.2f} | {1000*t_sweep['per_window_seconds']:.2f} | {x(t_sweep['per_window_seconds'], o_sweep['per_window_seconds'])} |")
print()
print(f"Blank-paper skipping on the synthetic-plant A1 sheet: threshold {o_plant['threshold']:.4f} ink fraction (half the smallest")
print(f"ink fraction of the {o_plant['symbols']} windows centred on its labelled symbols, as training chooses it from positive crops);")
print(f"{o_plant['skipped']} of {o_plant['cells']} windows ({100*o_plant['skipped_share']:.1f}%) skipped; symbols whose nearest grid window was skipped:")
print(f"{o_plant['symbols_lost']}. The weights are random (speed only), so this does not show detection quality; the held-out")
print("evaluation of trained models is where a lost symbol would show. A skipped window can hide a faint")
print("symbol; automated output supports, and does not replace, review by qualified people under the")
print("site's procedures and local codes.\n")
print(f"Kernels at batch 64 (best of several runs), against the FP32 peak measured on the same cores with")
print(f"chains of independent fused multiply-adds ({o_kern['peak_isa']}): {o_kern['peak_gflops']:.0f} GFLOP/s on {o_kern['threads']} threads.\n")
print("| kernel | shape | ms | GFLOP/s | share of peak |")
print("|---|---|---|---|---|")
for k in o_kern["kernels"]:
    print(f"| {k['kernel']} | {k['shape']} | {k['ms']:.1f} | {k['gflops']:.1f} | {100*k['peak_share']:.0f}% |")
print()
print("Backward GFLOP/s count the weight-gradient GEMM and, except for the first layer (whose input is")
print("data and gets no gradient), the input-gradient GEMM; each equals the forward's multiply-adds.\n")
print(f"Peak memory (VmHWM) of the A1 dense-sweep process: {o_sweep['peak_rss_mib']:.0f} MiB.")
print(f"A0 at 300 dpi ({o_mem['width']} x {o_mem['height']}, {o_mem['cells']} cells at stride 8, dense): "
      f"{o_mem['seconds']:.0f} s, peak resident memory {o_mem['peak_rss_mib']:.0f} MiB "
      f"(of which {o_mem['peak_rss_mib_before_sweep']:.0f} MiB before the sweep: the sheet and the binary).\n")
print('How to read these figures (static notes kept in bench/peer.sh):')
print('')
print('- Goals of the kernel work: training at least 1.0x PyTorch, a dense A1 sweep no slower than')
print("  PyTorch's, at least 2x PyTorch's dense sweep with blank skipping, A0 at 300 dpi under 1 GiB, and")
print('  the convolution forward kernels at 50% of the measured FP32 peak or better. The table above says')
print('  which were met in this run. The forward kernels run as direct convolutions (AVX-512 or AVX2+FMA)')
print('  with bias, ReLU, pooling and arg-max in registers; with two threads under shared load they')
print('  measured 43-57% of the two-thread peak, single-threaded 53-63% (reports/bench/trainer.md,')
print('  kernel section). The share is taken against a peak measured under the same load.')
print("- Backward passes run below their forward's rate because the input-gradient GEMM has the output")
print('  channels (16-64) as its inner dimension and its result is added back by col2im.')
print("- Both sides run the same network; symtrust's training figure includes augmentation and a")
print('  validation pass that the PyTorch script does not do.')
print('- Skipping is measured on one synthetic-plant sheet with random weights; the share of skipped')
print('  windows depends on how much of a real sheet is blank paper.')
print()
print("Commands:\n")
print("```")
print("PEER_TORCH_VENV=/path/to/venv-with-torch bench/peer.sh   # or bench/peer.sh to install torch into a throwaway venv")
print("RAYON_NUM_THREADS=2 target/release/examples/peer_bench train 100 64 20")
print("RAYON_NUM_THREADS=2 target/release/examples/peer_bench sweep 6622 4677 8 256")
print("RAYON_NUM_THREADS=2 target/release/examples/peer_bench plant 200 8")
print("RAYON_NUM_THREADS=2 target/release/examples/peer_bench kernels")
print("RAYON_NUM_THREADS=2 target/release/examples/peer_bench memory 14043 9933 8")
print("OMP_NUM_THREADS=2 python bench/peer_torch.py train 100 64 20")
print("OMP_NUM_THREADS=2 python bench/peer_torch.py sweep 6622 4677 8 256")
print("```\n")
print("Raw results (JSON lines):\n")
print("```")
for r in rows:
    print(json.dumps(r))
print("```")
PY
echo "wrote reports/bench/trainer.md" >&2
