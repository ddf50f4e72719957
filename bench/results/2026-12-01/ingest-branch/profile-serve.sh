#!/bin/bash
# usage: prof.sh BIN OUT.prof  — serve consumes a copy of the 500k template; 3 s CPU profile after 0.7 s
BIN=$1; OUT=$2; D=/tmp/wi/p-$$
rm -rf $D; cp -a /tmp/wi/t $D
$BIN serve --data $D --http 127.0.0.1:18080 --nats-listen 127.0.0.1:14222 --debug-addr 127.0.0.1:16060 --log-level warn > $D.log 2>&1 &
P=$!
sleep 0.3
curl -s -o $OUT "http://127.0.0.1:16060/debug/pprof/profile?seconds=6"
for i in $(seq 1 100); do a=$(curl -s 127.0.0.1:18080/v1/stats | grep -o '"events_applied":[0-9]*'); [ "$a" = '"events_applied":500000' ] && break; sleep 0.1; done
echo "$a"
kill $P; wait $P; rm -rf $D
