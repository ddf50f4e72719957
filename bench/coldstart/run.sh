#!/bin/sh
# Every command behind bench/RESULTS.md, from the project root:
#
#   sh bench/coldstart/run.sh [STEP...]      (default: every step, in order)
#
# Steps: build scenario eshop-knn eshop-knn-grid eshop-blend eshop-cold
# eshop-vstan eshop-nocat eshop-explore eshop-market synth-knn synth-blend
# synth-blend-sr synth-cold synth-fresh synth-vstan synth-nocat synth-explore
# synth-launch synth-market tables. Results go to $OUT
# (default /tmp/coldstart-results), the scenario to $SCEN (default
# /tmp/coldscenario); each command's wall and CPU time is appended to
# $OUT/times.txt. Each step runs in a few minutes on 2 shared cores; run
# it in the background (nohup) and watch times.txt.
set -eu
OUT=${OUT:-/tmp/coldstart-results}
SCEN=${SCEN:-/tmp/coldscenario}
ESHOP=../shared/data/eshop-clothing-2008/eshop-clothing-2008.csv.gz
WM="$OUT/waymark"
CS="$OUT/coldstart"
mkdir -p "$OUT"

t() { # t NAME CMD...: run CMD, log its output to $OUT/NAME.txt and its times
	name=$1
	shift
	echo "== $name: $*" >>"$OUT/times.txt"
	/usr/bin/time -o "$OUT/$name.time" -f "%e s wall, %U s user" "$@" >"$OUT/$name.txt" 2>&1
	echo "   $(cat "$OUT/$name.time")" >>"$OUT/times.txt"
}

step() {
	case $1 in
	build)
		go build -o "$WM" ./cmd/waymark
		go build -o "$CS" ./bench/coldstart
		;;
	scenario)
		t scenario go run ./bench/coldscenario --out "$SCEN"
		;;

	# --- e-shop clothing 2008, through `waymark replay` itself -------------
	eshop-knn)
		t eshop-knn "$WM" replay --models sr,iknn,sknn,vsknn,vstan --timings --json "$OUT/eshop-knn.json" "$ESHOP"
		;;
	eshop-knn-grid)
		t eshop-knn-grid "$WM" replay --models 'vsknn(k=50,m=1000|2000),vstan(k=50,m=1000|2000)' --timings --json "$OUT/eshop-knn-grid.json" "$ESHOP"
		;;
	eshop-blend)
		t eshop-blend "$WM" replay --models pop,markov,content,blend --timings --json "$OUT/eshop-blend.json" "$ESHOP"
		;;
	eshop-cold)
		t eshop-cold "$WM" replay --models 'blend(markov=1,sr=1,iknn=1),blend(markov=1,sr=1,iknn=1,content=1,fresh=1),fresh,blend(markov=1,sr=1,iknn=1,content=1,vstan=0.5)' --timings --json "$OUT/eshop-cold.json" "$ESHOP"
		;;
	eshop-vstan)
		# V-STAN inside the default blend, in one run with the blend for
		# the paired test.
		t eshop-vstan "$WM" replay --models 'blend,blend(markov=1,sr=1,iknn=1,content=1,vstan=0.5)' --timings --json "$OUT/eshop-vstan.json" "$ESHOP"
		;;
	eshop-nocat)
		t eshop-nocat "$WM" replay --catalog=false --models blend,content --timings --json "$OUT/eshop-nocat.json" "$ESHOP"
		;;
	eshop-explore)
		# The serve engine: the blend alone (checked against the replay
		# evaluator), then with serve's exploration slots.
		t eshop-serve "$CS" serve --label blend --check --block-events 2000 --blocks 10 --json "$OUT/eshop-serve.json" "$ESHOP"
		t eshop-explore "$CS" serve --label "blend+explore" --explore-every 10 --block-events 2000 --blocks 10 --json "$OUT/eshop-explore.json" "$ESHOP"
		;;
	eshop-market)
		# Second market: visitors from other countries, opening 2008-06-01;
		# priors from the home market (country 29) learned until then.
		# Item codes are the same in both, so no id map.
		t eshop-split "$CS" eshop-split --open 2008-06-01 --home-out "$OUT/eshop-home.csv.gz" --second-out "$OUT/eshop-second.csv.gz" "$ESHOP"
		t eshop-export "$CS" export-priors --until 2008-06-01T00:00:00Z --out "$OUT/eshop-home.priors.jsonl" "$OUT/eshop-home.csv.gz"
		t eshop-market-none "$CS" serve --label "no priors" --check --block-events 1000 --blocks 10 --json "$OUT/eshop-market-none.json" "$OUT/eshop-second.csv.gz"
		t eshop-market-w05 "$CS" serve --label "priors 0.5" --priors "$OUT/eshop-home.priors.jsonl" --weight 0.5 --block-events 1000 --blocks 10 --json "$OUT/eshop-market-w05.json" "$OUT/eshop-second.csv.gz"
		t eshop-market-w1 "$CS" serve --label "priors 1" --priors "$OUT/eshop-home.priors.jsonl" --weight 1 --block-events 1000 --blocks 10 --json "$OUT/eshop-market-w1.json" "$OUT/eshop-second.csv.gz"
		t eshop-market-nocat "$CS" serve --label "no priors, no catalogue" --catalog=false --block-events 1000 --blocks 10 --json "$OUT/eshop-market-nocat.json" "$OUT/eshop-second.csv.gz"
		t eshop-market-nocat-w05 "$CS" serve --label "priors 0.5, no catalogue" --catalog=false --priors "$OUT/eshop-home.priors.jsonl" --weight 0.5 --block-events 1000 --blocks 10 --json "$OUT/eshop-market-nocat-w05.json" "$OUT/eshop-second.csv.gz"
		;;

	# --- the synthetic scenario (bench/coldscenario) -------------------------
	synth-knn)
		t synth-knn "$CS" replay --catalog-file "$SCEN/site-a.catalog.jsonl" --models sr,iknn,sknn,vsknn,vstan --timings --json "$OUT/synth-knn.json" "$SCEN/site-a.events.jsonl.gz"
		;;
	synth-blend)
		t synth-blend "$CS" replay --catalog-file "$SCEN/site-a.catalog.jsonl" --models pop,markov,content,blend --timings --json "$OUT/synth-blend.json" "$SCEN/site-a.events.jsonl.gz"
		;;
	synth-blend-sr)
		# The blend and SR in one run, for their paired test.
		t synth-blend-sr "$CS" replay --catalog-file "$SCEN/site-a.catalog.jsonl" --models sr,blend --timings --json "$OUT/synth-blend-sr.json" "$SCEN/site-a.events.jsonl.gz"
		;;
	synth-cold)
		t synth-cold "$CS" replay --catalog-file "$SCEN/site-a.catalog.jsonl" --models 'blend(markov=1,sr=1,iknn=1),blend(markov=1,sr=1,iknn=1,content=1,fresh=1),fresh,blend(markov=1,sr=1,iknn=1,content=1,vstan=0.5)' --timings --json "$OUT/synth-cold.json" "$SCEN/site-a.events.jsonl.gz"
		;;
	synth-fresh)
		# fresh scoring only items inside its 48-hour window: replay records
		# no impressions, so by default (min_impressions=20) every item
		# stays "fresh" for ever.
		t synth-fresh "$CS" replay --catalog-file "$SCEN/site-a.catalog.jsonl" --models 'fresh(min_impressions=0),fresh(min_impressions=0,content=0)' --timings --json "$OUT/synth-fresh.json" "$SCEN/site-a.events.jsonl.gz"
		;;
	synth-vstan)
		t synth-vstan "$CS" replay --catalog-file "$SCEN/site-a.catalog.jsonl" --models 'blend,blend(markov=1,sr=1,iknn=1,content=1,vstan=0.5)' --timings --json "$OUT/synth-vstan.json" "$SCEN/site-a.events.jsonl.gz"
		;;
	synth-nocat)
		t synth-nocat "$CS" replay --models blend,content --timings --json "$OUT/synth-nocat.json" "$SCEN/site-a.events.jsonl.gz"
		;;
	synth-explore)
		t synth-serve "$CS" serve --label blend --check --catalog-file "$SCEN/site-a.catalog.jsonl" --block 24h --blocks 14 --json "$OUT/synth-serve.json" "$SCEN/site-a.events.jsonl.gz"
		t synth-explore "$CS" serve --label "blend+explore" --explore-every 10 --catalog-file "$SCEN/site-a.catalog.jsonl" --block 24h --blocks 14 --json "$OUT/synth-explore.json" "$SCEN/site-a.events.jsonl.gz"
		;;
	synth-launch)
		# Cold targets per day on the serve path, for blends without content,
		# and with content and the fresh-item signal; with synth-explore's
		# two runs this separates the shop's first day (every item new)
		# from the items launched later.
		t synth-serve-nocontent "$CS" serve --label "blend(markov,sr,iknn)" --blend 'blend(markov=1,sr=1,iknn=1)' --catalog-file "$SCEN/site-a.catalog.jsonl" --block 24h --blocks 14 --json "$OUT/synth-serve-nocontent.json" "$SCEN/site-a.events.jsonl.gz"
		t synth-serve-fresh "$CS" serve --label "blend(markov,sr,iknn,content,fresh)" --blend 'blend(markov=1,sr=1,iknn=1,content=1,fresh=1)' --catalog-file "$SCEN/site-a.catalog.jsonl" --block 24h --blocks 14 --json "$OUT/synth-serve-fresh.json" "$SCEN/site-a.events.jsonl.gz"
		;;
	synth-market)
		# The second site opens 2026-03-12T08:00Z; priors from the first
		# site learned until then, mapped through the id map.
		t synth-export "$CS" export-priors --until 2026-03-12T08:00:00Z --catalog-file "$SCEN/site-a.catalog.jsonl" --out "$OUT/site-a.priors.jsonl" "$SCEN/site-a.events.jsonl.gz"
		B="--catalog-file $SCEN/site-b.catalog.jsonl --block 1h --blocks 12"
		t synth-market-none "$CS" serve --label "no priors" --check $B --json "$OUT/synth-market-none.json" "$SCEN/site-b.events.jsonl.gz"
		t synth-market-w05 "$CS" serve --label "priors 0.5" --priors "$OUT/site-a.priors.jsonl" --map "$SCEN/idmap.csv" --weight 0.5 $B --json "$OUT/synth-market-w05.json" "$SCEN/site-b.events.jsonl.gz"
		t synth-market-w1 "$CS" serve --label "priors 1" --priors "$OUT/site-a.priors.jsonl" --map "$SCEN/idmap.csv" --weight 1 $B --json "$OUT/synth-market-w1.json" "$SCEN/site-b.events.jsonl.gz"
		t synth-market-nocat "$CS" serve --label "no priors, no catalogue" --catalog=false $B --json "$OUT/synth-market-nocat.json" "$SCEN/site-b.events.jsonl.gz"
		t synth-market-nocat-w05 "$CS" serve --label "priors 0.5, no catalogue" --catalog=false --priors "$OUT/site-a.priors.jsonl" --map "$SCEN/idmap.csv" --weight 0.5 $B --json "$OUT/synth-market-nocat-w05.json" "$SCEN/site-b.events.jsonl.gz"
		;;

	tables)
		for f in eshop-knn eshop-knn-grid eshop-blend eshop-cold eshop-vstan eshop-nocat synth-knn synth-blend synth-blend-sr synth-cold synth-fresh synth-vstan synth-nocat; do
			if [ -f "$OUT/$f.json" ]; then
				echo "### $f"
				"$CS" table "$OUT/$f.json"
				echo
			fi
		done
		echo "### eshop-explore"
		"$CS" table "$OUT/eshop-serve.json" "$OUT/eshop-explore.json"
		"$CS" table --cold "$OUT/eshop-serve.json" "$OUT/eshop-explore.json" | sed -n '/per block/,$p'
		echo "### synth-explore, synth-launch"
		S="$OUT/synth-serve-nocontent.json $OUT/synth-serve.json $OUT/synth-serve-fresh.json $OUT/synth-explore.json"
		"$CS" table --after 1 $S
		"$CS" table --cold --after 1 $S | sed -n '/per block/,$p'
		echo "### eshop-market"
		"$CS" table "$OUT"/eshop-market-none.json "$OUT"/eshop-market-w05.json "$OUT"/eshop-market-w1.json "$OUT"/eshop-market-nocat.json "$OUT"/eshop-market-nocat-w05.json
		"$CS" table --cold "$OUT"/eshop-market-none.json "$OUT"/eshop-market-w05.json "$OUT"/eshop-market-nocat.json "$OUT"/eshop-market-nocat-w05.json | sed -n '/per block/,$p'
		echo "### synth-market"
		"$CS" table "$OUT"/synth-market-none.json "$OUT"/synth-market-w05.json "$OUT"/synth-market-w1.json "$OUT"/synth-market-nocat.json "$OUT"/synth-market-nocat-w05.json
		"$CS" table --cold "$OUT"/synth-market-none.json "$OUT"/synth-market-w05.json "$OUT"/synth-market-nocat.json "$OUT"/synth-market-nocat-w05.json | sed -n '/per block/,$p'
		;;
	*)
		echo "run.sh: unknown step $1" >&2
		exit 2
		;;
	esac
}

if [ $# -eq 0 ]; then
	set -- build scenario eshop-knn eshop-knn-grid eshop-blend eshop-cold eshop-vstan eshop-nocat eshop-explore eshop-market \
		synth-knn synth-blend synth-blend-sr synth-cold synth-fresh synth-vstan synth-nocat synth-explore synth-launch synth-market tables
fi
for s in "$@"; do
	step "$s"
done
