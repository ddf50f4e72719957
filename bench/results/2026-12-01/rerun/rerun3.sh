#!/usr/bin/env bash
set -u
cd /tmp/wb
while ! grep -q '== done2' /tmp/wb/rerun2.log; do sleep 5; done
O=/tmp/wb/rerun; W=/tmp/wb/rw3; mkdir -p $W
J=$O/results.jsonl
echo "== fill2M $(date -u +%T)"; ./ingest fill --dir $W/t2m --events 2000000 > $O/fill2m.log 2>&1
echo "== restart2M $(date -u +%T)"; timeout 1200 ./ingest restart --template $W/t2m --events 2000000 --rounds 3 --waymark ./waymark --work $W --json $J > $O/restart2m.log 2> $O/restart2m.err
cp $W/restart.log $O/restart2m-serve.log 2>/dev/null
rm -rf $W/t2m
echo "== fill10M $(date -u +%T)"; ./ingest fill --dir $W/t10m --events 10000000 > $O/fill10m-2.log 2>&1
echo "== restart10M-smallflush $(date -u +%T)"; timeout 2400 ./ingest restart --template $W/t10m --events 10000000 --rounds 3 --waymark ./waymark --work $W --json $J --serve-args "--flush-events 20000 --flush-interval 200ms" > $O/restart10m-small.log 2> $O/restart10m-small.err
cp $W/restart.log $O/restart10m-small-serve.log 2>/dev/null
rm -rf $W
echo "== done3 $(date -u +%T)"
cd /work/main && OUT=/tmp/wb/quick bench/run-all > /tmp/wb/quick.log 2>&1
echo "== quick done $(date -u +%T)"
