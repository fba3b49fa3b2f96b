#!/usr/bin/env bash
# A Ballista cluster on this machine, started and stopped by hand as a user would:
# one `lagwise-node scheduler` and two `lagwise-node executor` processes on free
# 127.0.0.1 ports, a query from `lagwise-node sql` over the Parquet export of the
# historian example (invented Kestrel Bay data), then every node stopped and checked
# gone. Called by scripts/check.sh, which builds the two programs first in the test
# profile (`cargo test` builds examples only as test harnesses).
#
# The nodes bind 127.0.0.1 only and authenticate nobody: see README "On a cluster".
set -euo pipefail
cd "$(dirname "$0")/.."
bin=target/debug
node="$bin/lagwise-node"
example="$bin/examples/historian_sql"
for f in "$node" "$example"; do
    [[ -x "$f" ]] || {
        echo "missing $f: run cargo build --workspace --profile test --example historian_sql --bin lagwise-node first" >&2
        exit 1
    }
done
work=$(mktemp -d "${TMPDIR:-/tmp}/lagwise-cluster.XXXXXX")
pids=()
stop_nodes() {
    for pid in "${pids[@]}"; do kill "$pid" 2>/dev/null || true; done
    for pid in "${pids[@]}"; do wait "$pid" 2>/dev/null || true; done
    pids=()
}
cleanup() {
    stop_nodes
    rm -rf "$work"
}
trap cleanup EXIT

# The first line a node prints is the address it listens on.
first_line() {
    local file=$1 line=""
    for _ in $(seq 1 300); do
        line=$(head -n 1 "$file" 2>/dev/null || true)
        [[ -n "$line" ]] && { echo "$line"; return 0; }
        sleep 0.1
    done
    echo "no address from $file" >&2
    return 1
}

echo "-- Parquet export (historian example, 6 substations)"
"$example" 6 > "$work/in-process.txt"
data="$PWD/target/kestrel-bay/historian/"

echo "-- scheduler"
"$node" scheduler --ready-executors 2 > "$work/scheduler.out" 2> "$work/scheduler.log" &
pids+=($!)
address=$(first_line "$work/scheduler.out")
address=${address#scheduler listening on }
[[ "$address" == 127.0.0.1:* ]] || { echo "unexpected scheduler address $address" >&2; exit 1; }
echo "   $address (pid ${pids[0]})"

for k in 0 1; do
    mkdir -p "$work/executor-$k"
    "$node" executor --scheduler "$address" --slots 2 --work-dir "$work/executor-$k" \
        > "$work/executor-$k.out" 2> "$work/executor-$k.log" &
    pids+=($!)
    echo "-- executor $k: $(first_line "$work/executor-$k.out") (pid $!)"
done

# Ready when the scheduler's /readyz answers 200 (both executors registered).
ready=""
for _ in $(seq 1 300); do
    # (Braces: a bare `exec … 2>/dev/null` would silence the script's stderr for good.)
    if { exec 3<>"/dev/tcp/${address%:*}/${address#*:}"; } 2>/dev/null; then
        printf 'GET /readyz HTTP/1.1\r\nHost: %s\r\nConnection: close\r\n\r\n' "$address" >&3
        status=$(head -n 1 <&3 || true)
        exec 3>&- 3<&-
        [[ "$status" == *" 200"* ]] && { ready=yes; break; }
    fi
    sleep 0.2
done
[[ -n "$ready" ]] || { echo "cluster not ready; logs:" >&2; cat "$work"/*.log >&2; exit 1; }

echo "-- query on the cluster: each tag's daily-cycle model"
blueprint=$(sed -n 's/^blueprint: //p' "$work/in-process.txt")
"$node" sql --scheduler "$address" --partitions 4 --table "readings=$data" --query "
    SELECT tag, fit['model'] AS model, round(sqrt(fit['sigma2']), 3) AS sd,
           fit['white'] AS white, fit['readings'] AS readings, fit['error'] AS error
    FROM (SELECT tag, lw_fit(ts, value, '$blueprint', 900000) AS fit
          FROM readings GROUP BY tag)
    ORDER BY tag" | tee "$work/cluster.txt"
rows=$(grep -c '| KB-SS' "$work/cluster.txt" || true)
[[ "$rows" == 12 ]] || { echo "expected 12 tags from the cluster, got $rows" >&2; exit 1; }
# The same models as the in-process run of the example (model, sd, whiteness per tag).
diff <(grep '| KB-SS' "$work/in-process.txt" | head -n 12 | cut -d'|' -f2-5) \
     <(grep '| KB-SS' "$work/cluster.txt" | cut -d'|' -f2-5) \
    || { echo "cluster and in-process models differ" >&2; exit 1; }

echo "-- stopping the nodes"
stop_nodes
left=$(pgrep -f "$node" || true)
[[ -z "$left" ]] || { echo "nodes still running: $left" >&2; exit 1; }
echo "cluster check passed: 12 tags fitted on 2 executors, the same models as in process; no node left running"
