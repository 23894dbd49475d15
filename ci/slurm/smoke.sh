#!/usr/bin/env bash
# Smoke test of the local test cluster (run as root, after ci/slurm/up.sh).
#
# 1. A 4-task array job, submitted with `sbatch --wait --array=0-3`, where each
#    task writes its SLURM_ARRAY_TASK_ID and SLURM_ARRAY_TASK_COUNT to a file:
#    all four files must appear with the right contents, and sbatch must exit 0.
# 2. The same array where task 2 exits 3: `sbatch --wait` must exit non-zero
#    (Slurm returns the highest exit code among the array's tasks).
#    ci/slurm/wait.sh on the same array must exit 3 as well.
# 3. demo-data/slurm/sweep-array.sh with a recording stand-in for the tidewise
#    binary: each shard must get `--shard i/4 --jobs 2`.
# 4. The same script with --array=1-4 must refuse to run (exit 2).
# Prints one line per check and closes with 'N passed, N failed'.
set -uo pipefail

WORK="$(mktemp -d /tmp/tidewise-slurm-smoke.XXXXXX)"
trap 'rm -rf "$WORK"' EXIT
passed=0
failed=0
check() {
    local name="$1"
    shift
    if "$@"; then
        echo "ok   $name"
        passed=$((passed + 1))
    else
        echo "FAIL $name"
        failed=$((failed + 1))
    fi
}

cat >"$WORK/standin.sh" <<'EOF'
#!/bin/bash
#SBATCH --job-name=tw-smoke
#SBATCH --time=00:02:00
#SBATCH --cpus-per-task=1
#SBATCH --output=slurm-%A_%a.out
set -eu
printf '%s %s\n' "$SLURM_ARRAY_TASK_ID" "$SLURM_ARRAY_TASK_COUNT" >"task-$SLURM_ARRAY_TASK_ID.txt"
if [[ -n "${FAIL_TASK:-}" && "$SLURM_ARRAY_TASK_ID" == "$FAIL_TASK" ]]; then
    exit 3
fi
EOF

# --- check 1: all tasks succeed ---------------------------------------------
mkdir -p "$WORK/ok"
start=$(date +%s.%N)
(cd "$WORK/ok" && sbatch --wait --array=0-3 --chdir="$WORK/ok" "$WORK/standin.sh")
rc_ok=$?
end=$(date +%s.%N)
echo "4-task array (all succeed): sbatch exit $rc_ok, $(awk -v a="$start" -v b="$end" 'BEGIN{printf "%.1f", b-a}') s"

all_outputs() {
    local i
    for i in 0 1 2 3; do
        [[ "$(cat "$WORK/ok/task-$i.txt" 2>/dev/null)" == "$i 4" ]] || {
            echo "  task-$i.txt: '$(cat "$WORK/ok/task-$i.txt" 2>/dev/null)', want '$i 4'"
            return 1
        }
    done
}
check "sbatch --wait exits 0 when every task succeeds" test "$rc_ok" -eq 0
check "all 4 task files hold 'id count'" all_outputs
check "4 slurm-%A_%a.out files" test "$(find "$WORK/ok" -name 'slurm-*_*.out' | wc -l)" -eq 4

# --- check 2: one task fails ------------------------------------------------
mkdir -p "$WORK/bad"
start=$(date +%s.%N)
(cd "$WORK/bad" && FAIL_TASK=2 sbatch --wait --array=0-3 --export=ALL,FAIL_TASK=2 \
    --chdir="$WORK/bad" "$WORK/standin.sh")
rc_bad=$?
end=$(date +%s.%N)
echo "4-task array (task 2 exits 3): sbatch exit $rc_bad, $(awk -v a="$start" -v b="$end" 'BEGIN{printf "%.1f", b-a}') s"
check "sbatch --wait exits non-zero when a task fails" test "$rc_bad" -ne 0
check "sbatch --wait passes on the failing task's code (3)" test "$rc_bad" -eq 3

# --- check 2b: the same, waited for by ci/slurm/wait.sh ---------------------
HERE="$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)"
mkdir -p "$WORK/bad2"
start=$(date +%s.%N)
id="$(cd "$WORK/bad2" && sbatch --parsable --array=0-3 --export=ALL,FAIL_TASK=2 \
    --chdir="$WORK/bad2" "$WORK/standin.sh")"
"$HERE/wait.sh" --timeout 120 "$id"
rc_w=$?
end=$(date +%s.%N)
echo "4-task array (task 2 exits 3) via wait.sh: exit $rc_w, $(awk -v a="$start" -v b="$end" 'BEGIN{printf "%.1f", b-a}') s"
check "wait.sh passes on the failing task's code (3)" test "$rc_w" -eq 3
check "wait.sh saw all 4 task files" test "$(find "$WORK/bad2" -name 'task-*.txt' | wc -l)" -eq 4

# --- check 3: the example sweep script passes the right shard options -----
# A recording stand-in for the tidewise binary writes its arguments into the
# --out folder, so the wiring of demo-data/slurm/sweep-array.sh is checked
# without the real binary.
SWEEP="$HERE/../../demo-data/slurm/sweep-array.sh"
mkdir -p "$WORK/sw"
cat >"$WORK/sw/record-args" <<'EOF'
#!/bin/bash
out=""
prev=""
for a in "$@"; do
    [[ "$prev" == "--out" ]] && out="$a"
    prev="$a"
done
mkdir -p "$out"
printf '%s\n' "$*" >"$out/argv"
EOF
chmod +x "$WORK/sw/record-args"
: >"$WORK/sw/spec.toml"
start=$(date +%s.%N)
(cd "$WORK/sw" && TIDEWISE="$WORK/sw/record-args" SPEC=spec.toml GRID=grid.toml OUT=out \
    sbatch --wait --chdir="$WORK/sw" "$SWEEP")
rc_sw=$?
end=$(date +%s.%N)
echo "sweep-array.sh, 4 shards x 2 cpus: sbatch exit $rc_sw, $(awk -v a="$start" -v b="$end" 'BEGIN{printf "%.1f", b-a}') s"
sweep_args() {
    local i want got
    for i in 0 1 2 3; do
        want="sweep spec.toml --grid grid.toml --out out/shard-$i --shard $i/4 --jobs 2"
        got="$(cat "$WORK/sw/out/shard-$i/argv" 2>/dev/null)"
        [[ "$got" == "$want" ]] || {
            echo "  shard $i: got '$got', want '$want'"
            return 1
        }
    done
}
check "sweep-array.sh exits 0" test "$rc_sw" -eq 0
check "sweep-array.sh runs 'sweep ... --shard i/4 --jobs 2' for i=0..3" sweep_args

# --- check 4: an array that does not start at 0 is refused ------------------
mkdir -p "$WORK/sw1"
(cd "$WORK/sw1" && TIDEWISE="$WORK/sw/record-args" SPEC="$WORK/sw/spec.toml" OUT=out \
    sbatch --wait --array=1-4 --chdir="$WORK/sw1" "$SWEEP")
rc_sw1=$?
check "sweep-array.sh with --array=1-4 exits 2" test "$rc_sw1" -eq 2
check "sweep-array.sh with --array=1-4 names the allowed array" \
    grep -q -- "use --array=0-3" "$WORK"/sw1/tidewise-sweep-*_1.out

echo "$passed passed, $failed failed"
[[ "$failed" -eq 0 ]]
