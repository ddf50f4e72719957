package eval

import "strconv"

// Summary describes a log as loaded, before preprocessing.
type Summary struct {
	Sources []SourceSummary `json:"sources"`
	Events  int64           `json:"events"`
	// Sessions counts session instances as the tracker forms them (a
	// visitor back after the inactivity timeout starts a new one);
	// SessionIDs counts distinct session keys.
	Sessions   int64 `json:"sessions"`
	SessionIDs int64 `json:"session_ids"`
	Items      int64 `json:"items"`
	// First and Last are the earliest and latest event times (RFC 3339).
	First       string  `json:"first"`
	Last        string  `json:"last"`
	SpanSeconds float64 `json:"span_seconds"`
	BadRecords  int64   `json:"bad_records"`
	OutOfOrder  int64   `json:"out_of_order"`
	Catalog     int64   `json:"catalog_records"`
	// Repeats counts clicks on the item the session clicked just before.
	Repeats         int64          `json:"repeats"`
	SessionsLength1 int64          `json:"sessions_length_1"`
	MeanLength      float64        `json:"mean_length"`
	MaxLength       int64          `json:"max_length"`
	Lengths         []LengthBucket `json:"lengths"`
}

// LengthBucket counts the sessions whose click count lies in a range.
type LengthBucket struct {
	Length   string `json:"length"` // "1", "2", ..., "6-10", "101+"
	Sessions int64  `json:"sessions"`
}

// lengthEdges are the lower ends of the length buckets.
var lengthEdges = [...]int64{1, 2, 3, 4, 5, 6, 11, 21, 51, 101}

func bucketLabel(i int) string {
	lo := lengthEdges[i]
	if i == len(lengthEdges)-1 {
		return strconv.FormatInt(lo, 10) + "+"
	}
	hi := lengthEdges[i+1] - 1
	if hi == lo {
		return strconv.FormatInt(lo, 10)
	}
	return strconv.FormatInt(lo, 10) + "-" + strconv.FormatInt(hi, 10)
}

// Summarize describes the log, forming sessions with the given inactivity
// timeout (unix ms).
func (l *Log) Summarize(timeoutMS int64) Summary {
	s := Summary{
		Sources:    l.sources,
		Events:     int64(len(l.ev)),
		SessionIDs: int64(len(l.sessions)),
		Items:      int64(len(l.items)),
		BadRecords: l.bad,
		OutOfOrder: l.reorder,
		Catalog:    int64(len(l.catalog)),
	}
	if s.Sources == nil {
		s.Sources = []SourceSummary{}
	}
	for i := range lengthEdges {
		s.Lengths = append(s.Lengths, LengthBucket{Length: bucketLabel(i)})
	}
	if len(l.ev) == 0 {
		return s
	}
	s.First, s.Last = fmtTS(l.ev[0].ts), fmtTS(l.ev[len(l.ev)-1].ts)
	s.SpanSeconds = float64(l.ev[len(l.ev)-1].ts-l.ev[0].ts) / 1000
	inst, infos := instances(l, nil, timeoutMS)
	lastItem := make([]int64, len(infos))
	for i := range lastItem {
		lastItem[i] = -1
	}
	for i, r := range l.ev {
		in := inst[i]
		if lastItem[in] == int64(r.item) {
			s.Repeats++
		}
		lastItem[in] = int64(r.item)
	}
	s.Sessions = int64(len(infos))
	for _, in := range infos {
		n := int64(in.n)
		if n == 1 {
			s.SessionsLength1++
		}
		s.MaxLength = max(s.MaxLength, n)
		b := len(lengthEdges) - 1
		for b > 0 && n < lengthEdges[b] {
			b--
		}
		s.Lengths[b].Sessions++
	}
	s.MeanLength = float64(s.Events) / float64(s.Sessions)
	return s
}
