#!/bin/bash
# usage: ab.sh ROUNDS BIN... — serve consumes a copy of the 500k template; prints events/s from first applied to all applied
R=$1; shift
for r in $(seq 1 $R); do
 for BIN in "$@"; do
  D=/tmp/wi/ab-$$; rm -rf $D; cp -a /tmp/wi/t $D
  $BIN serve --data $D --http 127.0.0.1:18081 --nats-listen 127.0.0.1:14223 --log-level warn > $D.log 2>&1 &
  P=$!
  t0=""; a=0
  for i in $(seq 1 3000); do
    a=$(curl -s 127.0.0.1:18081/v1/stats | grep -o '"events_applied":[0-9]*' | cut -d: -f2)
    now=$(date +%s.%N)
    if [ -n "$a" ] && [ "$a" -gt 0 ] && [ -z "$t0" ]; then t0=$now; a0=$a; fi
    [ "$a" = 500000 ] && break
    sleep 0.02
  done
  cpu=$(awk '{print ($14+$15)/100}' /proc/$P/stat)
  echo "$(basename $BIN) round $r: cpu ${cpu}s $(echo "($a-$a0)/($now-$t0)" | bc -l | cut -c1-8) ev/s load $(cut -d' ' -f1 /proc/loadavg)"
  kill $P; wait $P 2>/dev/null; rm -rf $D $D.log
 done
done
