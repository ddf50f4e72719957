#!/usr/bin/env bash
# Re-run of the contended steps of full3 on the quiet machine, same binaries (commit 046a8cd).
set -uo pipefail
cd /work/main
out=/tmp/wb/full3; B=$out/bin; W=/tmp/wb/rerun-work; mkdir -p $W; J=$out/results-rerun.jsonl; R=3; EV=1000000
step() { local name=$1 t=$2; shift 2; local s=$(date +%s); echo "== $name ($(date -u +%H:%M:%S))"
  timeout --kill-after=30 "$t" "$@" > "$out/rerun-$name.log" 2> "$out/rerun-$name.err"; local rc=$?
  grep -v '^  .* round [0-9]*:' "$out/rerun-$name.log" | sed 's/^/   /'; [ $rc = 0 ] || echo "   $name FAILED ($rc)"; echo "   ($(( $(date +%s) - s )) s)"; }
step bus 1200 "$B/ingest" bus --template /tmp/wb/t-full3 --events $EV --rounds $R --waymark "$B/waymark" --work "$W" --json "$J" --profile "$out/serve-bus.prof"
step fresh 900 "$B/ingest" fresh --template /tmp/wb/t-full3 --events $EV --rounds 3 --probes 10 --limit 5s --rate 100000 --waymark "$B/waymark" --work "$W" --json "$J"
step http 1200 "$B/http" run --template /tmp/wb/t-full3 --events $EV --rounds $R --duration 10s --waymark "$B/waymark" --work "$W" --wrk-script bench/wrk/next.lua --json "$J" --profile "$out/serve-http.prof"
step replay 1200 "$B/replay" run --events $EV --rounds $R --waymark "$B/waymark" --work "$W" --json "$J"
step fill-restart 1800 "$B/ingest" fill --dir "$W/t-restart" --events 10000000
step restart 3600 "$B/ingest" restart --template "$W/t-restart" --events 10000000 --rounds $R --waymark "$B/waymark" --work "$W" --json "$J"
rm -rf "$W/t-restart"
step learn 600 "$B/learn" --events 1000000 --rounds 5 --json "$J"
echo rerun done
