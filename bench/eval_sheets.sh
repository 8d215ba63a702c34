#!/usr/bin/env bash
# A full evaluation of N A1 sheets at 200 dpi (default 20), end to end with the
# CLI: synthetic site, crop library, a one-epoch model (its quality does not
# matter for timing), then `symtrust eval --model` over the N A1 sheets held
# out. Reports wall time, time per sheet and peak memory (/usr/bin/time -v) of
# the evaluation, and writes them into reports/bench/eval.md (its own section,
# between the `sheets-bench` markers; the rest of the file is kept).
#
#   bench/eval_sheets.sh [N] [DIR]      # DIR default /tmp/symtrust-eval-sheets
#
# `symtrust synth` draws every fourth sheet on A1 (indices 3, 7, 11, ...) and
# has no option for A1 only, so the script draws 4N sheets and puts the N A1
# sheets (6622 x 4677 px at 200 dpi) on the held-out list of site.toml; the
# 3N A3 sheets train the model. Generated data stays under DIR.
set -euo pipefail
cd "$(dirname "$0")/.."
repo=$(pwd)
n=${1:-20}
dir=${2:-/tmp/symtrust-eval-sheets}
report=reports/bench/eval.md
bin=target/release/symtrust
load_before=$(cut -d' ' -f1-3 /proc/loadavg)

echo "== build (cargo build --release)"
cargo build --release --bin symtrust

rm -rf "$dir"
mkdir -p "$dir"
site="$dir/site"

echo "== synth: $((4 * n)) sheets, $n of them A1"
t0=$(date +%s.%N)
"$bin" -q synth --out "$site" --sheets $((4 * n))
t_synth=$(echo "$(date +%s.%N) - $t0" | bc)

# The A1 sheets: width 6622 px (841 mm at 200 dpi) in their label documents.
mapfile -t a1 < <(grep -l '"width": 6622,' "$site"/labels/*.json | xargs -n1 basename | sed 's/\.json$//' | sort)
if [[ ${#a1[@]} -ne $n ]]; then
  echo "expected $n A1 sheets, found ${#a1[@]}" >&2
  exit 1
fi
list=$(printf '    "%s",\n' "${a1[@]}")
awk -v list="$list" '
  /^held_out = \[/ { print "held_out = ["; print list; skip = 1; next }
  skip && /^\]/ { print "]"; skip = 0; next }
  !skip { print }
' "$site/site.toml" > "$site/site.toml.new"
mv "$site/site.toml.new" "$site/site.toml"

echo "== crops build"
t0=$(date +%s.%N)
"$bin" -q --site "$site" crops build
t_crops=$(echo "$(date +%s.%N) - $t0" | bc)

echo "== train --epochs 1"
t0=$(date +%s.%N)
"$bin" -q --site "$site" train --epochs 1
t_train=$(echo "$(date +%s.%N) - $t0" | bc)
model=$(find "$site/models" -mindepth 1 -maxdepth 1 -type d | sort | tail -n 1)

echo "== eval --model $model ($n held-out A1 sheets)"
cmd=("$bin" -q --site "$site" eval --model "$model" --out "$dir/evaluation")
load_eval=$(cut -d' ' -f1-3 /proc/loadavg)
/usr/bin/time -v "${cmd[@]}" 2> "$dir/eval.time"
cat "$dir/eval.time"
wall=$(grep 'Elapsed (wall clock)' "$dir/eval.time" | awk '{print $NF}')
user=$(grep 'User time' "$dir/eval.time" | awk '{print $NF}')
sys=$(grep 'System time' "$dir/eval.time" | awk '{print $NF}')
rss_kb=$(grep 'Maximum resident set size' "$dir/eval.time" | awk '{print $NF}')
# m:ss.ss or h:mm:ss to seconds.
secs=$(echo "$wall" | awk -F: '{ s = 0; for (i = 1; i <= NF; i++) s = s * 60 + $i; print s }')
per_sheet=$(echo "scale=2; $secs / $n" | bc)
n_dets=$(($(wc -l < "$dir/evaluation/detections.csv") - 1))
n_truths=$(for s in "${a1[@]}"; do grep -c '"state": "accepted"' "$site/labels/$s.json"; done | paste -sd+ | bc)
load_after=$(cut -d' ' -f1-3 /proc/loadavg)
cpu=$(grep -m1 'model name' /proc/cpuinfo | cut -d: -f2 | sed 's/^ //')

section=$(cat <<EOF
## Full evaluation of $n A1 sheets at 200 dpi (\`bench/eval_sheets.sh\`)

- command: \`bench/eval_sheets.sh $n\`; the timed step is \`symtrust eval --model MODEL --out DIR\`
  (sweep of the model over each held-out sheet, sheets in parallel, crop-level figures,
  sheet-level figures with the default 1000 bootstrap resamples, evaluation folder written)
- machine: $cpu, $(nproc) logical cores, shared with other builds
- load average (1, 5, 15 min): before the script $load_before; before the evaluation
  $load_eval; after $load_after
- data: $n A1 sheets (6622 x 4677 px) held out, $((3 * n)) A3 sheets for the crops and the
  one-epoch model; $n_truths ground-truth symbols on the held-out sheets, $n_dets detections
  swept at the default minimum score

| step | wall time |
|---|---|
| synth ($((4 * n)) sheets) | $(printf '%.1f' "$t_synth") s |
| crops build | $(printf '%.1f' "$t_crops") s |
| train --epochs 1 | $(printf '%.1f' "$t_train") s |
| **eval, $n A1 sheets** | **$(printf '%.1f' "$secs") s** ($per_sheet s per sheet; user $user s, system $sys s) |

Peak memory of the evaluation (maximum resident set size): $((rss_kb / 1024)) MiB.
EOF
)

python3 - "$report" "$section" <<'PY'
import os, sys, tempfile
path, section = sys.argv[1], sys.argv[2]
start, end = "<!-- sheets-bench:start -->", "<!-- sheets-bench:end -->"
try:
    old = open(path).read()
except FileNotFoundError:
    old = "# Evaluation benchmarks\n"
block = f"{start}\n{section}\n{end}\n"
a, b = old.find(start), old.find(end)
if a >= 0 and b > a:
    rest = old[b + len(end):].lstrip("\n")
    new = old[:a] + block + (("\n" + rest) if rest else "")
else:
    new = old.rstrip("\n") + "\n\n" + block
fd, tmp = tempfile.mkstemp(dir=os.path.dirname(path) or ".")
with os.fdopen(fd, "w") as f:
    f.write(new)
os.replace(tmp, path)
PY
echo "figures written to $repo/$report"
