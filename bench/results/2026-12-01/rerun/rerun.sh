#!/usr/bin/env bash
set -u
cd /tmp/wb
O=/tmp/wb/rerun; mkdir -p $O; W=/tmp/wb/rw; mkdir -p $W
J=$O/results.jsonl
echo "== fill10M $(date -u +%T)"; ./ingest fill --dir $W/t10m --events 10000000 > $O/fill10m.log 2>&1
echo "== restart $(date -u +%T)"; timeout 3000 ./ingest restart --template $W/t10m --events 10000000 --rounds 3 --waymark ./waymark --work $W --json $J --serve-args "--flush-events 50000" > $O/restart.log 2> $O/restart.err
cp $W/restart.log $O/restart-serve.log 2>/dev/null
rm -rf $W/t10m
echo "== fill1M $(date -u +%T)"; ./ingest fill --dir $W/t1m --events 1000000 > $O/fill1m.log 2>&1
echo "== fresh100k $(date -u +%T)"; timeout 1200 ./ingest fresh --template $W/t1m --events 1000000 --rounds 2 --probes 10 --limit 5s --rate 100000 --waymark ./waymark --work $W --json $J > $O/fresh100k.log 2> $O/fresh100k.err
echo "== fresh10k $(date -u +%T)"; timeout 1200 ./ingest fresh --template $W/t1m --events 1000000 --rounds 3 --probes 30 --limit 5s --rate 10000 --waymark ./waymark --work $W --json $J > $O/fresh10k.log 2> $O/fresh10k.err
echo "== bus-metrics $(date -u +%T)"; timeout 1200 ./ingest bus --template $W/t1m --events 1000000 --rounds 3 --waymark ./waymark --work $W --json $J > $O/bus.log 2> $O/bus.err
echo "== query $(date -u +%T)"; timeout 1500 ./query --sizes 1000000,10000000 --rounds 3 --queries 4000 --json $J --cpuprofile $O/query.prof > $O/query.log 2> $O/query.err
echo "== replay-profile $(date -u +%T)"; timeout 600 ./replay profile --events 1000000 --cpuprofile $O/replay.prof --work $W > $O/replay-profile.log 2>&1
rm -rf $W
echo "== done $(date -u +%T)"
