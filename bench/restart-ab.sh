#!/usr/bin/env bash
# restart-ab.sh DIR ROUNDS BIN_A BIN_B: start-to-ready of serve on the same
# learned data folder, binaries alternating A B A B; prints one line per start.
dir=$1; rounds=$2; shift 2
for r in $(seq "$rounds"); do
  for bin in "$@"; do
    start=$(date +%s.%N)
    "$bin" serve --data "$dir" --http 127.0.0.1:18090 --nats-listen 127.0.0.1:14290 --debug-addr 127.0.0.1:18091 --log-level warn > /tmp/wb/restart-ab-serve.log 2>&1 &
    pid=$!
    until curl -sf -o /dev/null 127.0.0.1:18090/readyz; do sleep 0.01; done
    end=$(date +%s.%N)
    printf "round %d %s start-to-ready %.3f s\n" "$r" "$bin" "$(echo "$end - $start" | bc)"
    kill -TERM $pid; wait $pid
  done
done
