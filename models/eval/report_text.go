package eval

import (
	"encoding/csv"
	"fmt"
	"io"
	"sort"
	"strconv"
	"strings"
	"text/tabwriter"
)

// fmtMetric is how metrics are written for people: four decimals.
func fmtMetric(v float64) string { return strconv.FormatFloat(v, 'f', 4, 64) }

// fmtFloat is how metrics are written for machines: the shortest form that
// reads back to the same float64, as in the JSON.
func fmtFloat(v float64) string { return strconv.FormatFloat(v, 'g', -1, 64) }

// fmtP writes a p-value for people: three significant digits, and a bound
// where the value underflowed to zero (a "0" would read as certainty).
func fmtP(p float64) string {
	switch {
	case p <= 0:
		return "< 1e-300"
	case p < 1e-4:
		return strconv.FormatFloat(p, 'e', 1, 64)
	}
	return strconv.FormatFloat(p, 'g', 3, 64)
}

// fmtDiff writes a signed difference of metrics for people: four decimals,
// or two significant digits when four decimals would print "-0.0000".
func fmtDiff(d float64) string {
	switch {
	case d == 0:
		return "0"
	case d > -5e-5 && d < 5e-5:
		return strconv.FormatFloat(d, 'e', 1, 64)
	}
	return fmt.Sprintf("%+.4f", d)
}

// fmtSpan writes a time span in the unit a person reads it in.
func fmtSpan(seconds float64) string {
	switch {
	case seconds >= 2*86400:
		return strconv.FormatFloat(seconds/86400, 'f', 1, 64) + " days"
	case seconds >= 2*3600:
		return strconv.FormatFloat(seconds/3600, 'f', 1, 64) + " hours"
	case seconds >= 120:
		return strconv.FormatFloat(seconds/60, 'f', 1, 64) + " minutes"
	}
	return strconv.FormatFloat(seconds, 'f', 0, 64) + " s"
}

// RunLine sums up what produced the report in one line, "" when unknown.
func (r *Report) RunLine() string {
	if r.Run == nil {
		return ""
	}
	s := "waymark " + r.Run.Version
	if r.Run.Commit != "" {
		s += " (commit " + r.Run.Commit + ")"
	}
	if r.Run.Command != "" {
		s += ": " + r.Run.Command
	}
	return s
}

// paramString writes params as k=v pairs sorted by key.
func paramString(p map[string]string) string {
	keys := make([]string, 0, len(p))
	for k := range p {
		keys = append(keys, k)
	}
	sort.Strings(keys)
	parts := make([]string, len(keys))
	for i, k := range keys {
		parts[i] = k + "=" + p[k]
	}
	return strings.Join(parts, " ")
}

// DatasetLine sums up the dataset in one line.
func (s *Summary) DatasetLine() string {
	return fmt.Sprintf("%d events, %d sessions (%d session ids), %d items, %s to %s (%s); %d sessions of length 1, %d repeat clicks, %d bad records, %d out of order",
		s.Events, s.Sessions, s.SessionIDs, s.Items, s.First, s.Last, fmtSpan(s.SpanSeconds), s.SessionsLength1, s.Repeats, s.BadRecords, s.OutOfOrder)
}

// ProtocolLine sums up the protocol in one line.
func (p *ProtocolInfo) ProtocolLine() string {
	var b strings.Builder
	b.WriteString(string(p.Name))
	if p.SplitAt != "" {
		fmt.Fprintf(&b, " (split at %s", p.SplitAt)
		if p.LearnDuringTest {
			b.WriteString(", learning during the test")
		}
		b.WriteString(")")
	}
	if p.KFold != nil {
		k := p.KFold
		fmt.Fprintf(&b, " (%d folds, sessions of length >= %d, at most %d, last %d items as target, context %d, seed %d)",
			k.Folds, k.MinLength, k.MaxSessions, k.Targets, k.Context, k.Seed)
	} else {
		fmt.Fprintf(&b, ", target %s", p.Target)
	}
	ex := "session items excluded"
	if p.Exclude == ExcludeNone {
		ex = "session items allowed"
	}
	fmt.Fprintf(&b, ", %s, window %d, session timeout %s, half-life %s, cold below %d clicks",
		ex, p.Window, p.SessionTimeout, p.HalfLife, p.ColdThreshold)
	return b.String()
}

// WriteTable writes the report as terminal tables: a table of the metrics
// per cut-off (a row a model, a column a metric), then latency and the
// comparison with the best model.
func (r *Report) WriteTable(w io.Writer) error {
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', 0)
	if l := r.RunLine(); l != "" {
		fmt.Fprintf(tw, "run:      %s\n", l)
	}
	fmt.Fprintf(tw, "dataset:  %s\n", r.Dataset.DatasetLine())
	fmt.Fprintf(tw, "protocol: %s\n", r.Protocol.ProtocolLine())
	sc := r.Scoring
	fmt.Fprintf(tw, "queries:  %d (first clicks %d, repeats %d, training clicks %d, targets already in session %d, untracked %d)\n",
		sc.Queries, sc.FirstClicks, sc.Repeats, sc.TrainingClicks, sc.TargetsInSession, sc.Untracked)
	pp := r.Preprocessing
	fmt.Fprintf(tw, "dropped:  %d rare items (%d events), %d short sessions (%d events), %d unseen test events\n",
		pp.RareItems, pp.RareItemEvents, pp.ShortSessions, pp.ShortSessionEvents, pp.UnseenTestEvents)
	for _, k := range r.Protocol.K {
		fmt.Fprintf(tw, "\n@%d\tqueries", k)
		for _, n := range metricNames {
			fmt.Fprintf(tw, "\t%s", n)
		}
		fmt.Fprintf(tw, "\tcold HitRate\tcold MRR\n")
		for _, m := range r.Models {
			name := m.Name
			if m.Best {
				name += " *"
			}
			fmt.Fprintf(tw, "%s\t%d", name, m.Queries)
			for _, n := range metricNames {
				fmt.Fprintf(tw, "\t%s", fmtMetric(m.Metrics[Key(n, k)]))
			}
			if m.Cold.Queries == 0 {
				fmt.Fprintf(tw, "\tn/a\tn/a\n") // no cold query: a 0 would read as a result
				continue
			}
			fmt.Fprintf(tw, "\t%s\t%s\n", fmtMetric(m.Cold.Metrics[Key("HitRate", k)]), fmtMetric(m.Cold.Metrics[Key("MRR", k)]))
		}
	}
	k := r.Protocol.K[len(r.Protocol.K)-1]
	fmt.Fprintf(tw, "\nmodel\tp50 ms\tp99 ms\tMRR@%d vs best\tp\tHitRate@%d vs best\tp\n", k, k)
	for _, m := range r.Models {
		l := m.LatencyOf()
		fmt.Fprintf(tw, "%s\t%.4f\t%.4f", m.Name, l.P50MS, l.P99MS)
		if s := m.Significance; s != nil {
			fmt.Fprintf(tw, "\t%s\t%s\t%s\t%s\n", fmtDiff(s.MRR.MeanDiff), fmtP(s.MRR.P), fmtDiff(s.HitRate.MeanDiff), fmtP(s.HitRate.P))
		} else {
			fmt.Fprintf(tw, "\tbest\t\t\t\n")
		}
	}
	if len(r.Models) > 1 {
		fmt.Fprintf(tw, "\n* best by MRR@%d; p: %s\n", k, TestName)
	}
	for _, w := range r.Warnings {
		fmt.Fprintf(tw, "\nwarning: %s\n", w)
	}
	return tw.Flush()
}

// WriteCSV writes one row per model: name, parameters, counts, every metric
// at every cut-off, the breakdowns and the comparison with the best model.
func (r *Report) WriteCSV(w io.Writer, opts OutputOptions) error {
	cw := csv.NewWriter(w)
	head := []string{"model", "params", "queries", "answered", "best"}
	for _, k := range r.Protocol.K {
		for _, n := range metricNames {
			head = append(head, Key(n, k))
		}
	}
	head = append(head, "cold_queries")
	for _, k := range r.Protocol.K {
		for _, n := range breakdownNames {
			head = append(head, "cold_"+Key(n, k))
		}
	}
	for _, l := range positionLabels {
		head = append(head, "position_"+l+"_queries")
		for _, k := range r.Protocol.K {
			for _, n := range breakdownNames {
				head = append(head, "position_"+l+"_"+Key(n, k))
			}
		}
	}
	head = append(head, "mrr_diff", "mrr_p", "hitrate_diff", "hitrate_p")
	if opts.Timings {
		head = append(head, "p50_ms", "p99_ms")
	}
	if err := cw.Write(head); err != nil {
		return fmt.Errorf("write csv: %w", err)
	}
	for _, m := range r.Models {
		row := []string{m.Name, paramString(m.Params), strconv.FormatInt(m.Queries, 10), strconv.FormatInt(m.Answered, 10), strconv.FormatBool(m.Best)}
		for _, k := range r.Protocol.K {
			for _, n := range metricNames {
				row = append(row, fmtFloat(m.Metrics[Key(n, k)]))
			}
		}
		row = append(row, strconv.FormatInt(m.Cold.Queries, 10))
		for _, k := range r.Protocol.K {
			for _, n := range breakdownNames {
				row = append(row, fmtFloat(m.Cold.Metrics[Key(n, k)]))
			}
		}
		for _, p := range m.Positions {
			row = append(row, strconv.FormatInt(p.Queries, 10))
			for _, k := range r.Protocol.K {
				for _, n := range breakdownNames {
					row = append(row, fmtFloat(p.Metrics[Key(n, k)]))
				}
			}
		}
		if s := m.Significance; s != nil {
			row = append(row, fmtFloat(s.MRR.MeanDiff), fmtFloat(s.MRR.P), fmtFloat(s.HitRate.MeanDiff), fmtFloat(s.HitRate.P))
		} else {
			row = append(row, "", "", "", "")
		}
		if opts.Timings {
			l := m.LatencyOf()
			row = append(row, fmtFloat(l.P50MS), fmtFloat(l.P99MS))
		}
		if err := cw.Write(row); err != nil {
			return fmt.Errorf("write csv: %w", err)
		}
	}
	cw.Flush()
	if err := cw.Error(); err != nil {
		return fmt.Errorf("write csv: %w", err)
	}
	return nil
}
