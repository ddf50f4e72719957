#!/usr/bin/env bash
set -u
cd /tmp/wb
while ! grep -q '== done' /tmp/wb/rerun.log; do sleep 5; done
O=/tmp/wb/rerun; W=/tmp/wb/rw2; mkdir -p $W
J=$O/results.jsonl
echo "== fill5M $(date -u +%T)"; ./ingest fill --dir $W/t5m --events 5000000 > $O/fill5m.log 2>&1
echo "== restart5M $(date -u +%T)"; timeout 2400 ./ingest restart --template $W/t5m --events 5000000 --rounds 3 --waymark ./waymark --work $W --json $J > $O/restart5m.log 2> $O/restart5m.err
cp $W/restart.log $O/restart5m-serve.log 2>/dev/null
rm -rf $W/t5m
echo "== fill1M $(date -u +%T)"; ./ingest fill --dir $W/t1m --events 1000000 > $O/fill1m-2.log 2>&1
echo "== fresh100k-2 $(date -u +%T)"; timeout 1200 ./ingest fresh --template $W/t1m --events 1000000 --rounds 2 --probes 10 --limit 5s --rate 100000 --waymark ./waymark --work $W --json $J > $O/fresh100k-2.log 2> $O/fresh100k-2.err
rm -rf $W
echo "== done2 $(date -u +%T)"
