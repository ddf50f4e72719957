package eval

import (
	"fmt"
	"time"

	"waymark/models"
	"waymark/session"
)

// Protocol is how a replay splits learning from testing.
type Protocol string

const (
	// Prequential tests then learns every click of the log, in event
	// time, as the live service meets it.
	Prequential Protocol = "prequential"
	// Temporal learns everything before a split time and tests the
	// sessions that start at or after it.
	Temporal Protocol = "temporal"
	// KFold is the sequence-prediction protocol: k-fold cross-validation
	// over sessions, each test session's last items as the target.
	KFold Protocol = "kfold"
)

// Target says which clicks count as correct answers to a query.
type Target string

const (
	// TargetNext: the next click only.
	TargetNext Target = "next"
	// TargetRest: any later click of the session; Precision and Recall
	// are then over the distinct remaining items.
	TargetRest Target = "rest"
)

// Exclusion says which items a query may not be answered with.
type Exclusion string

const (
	// ExcludeDefault is ExcludeSession for the prequential and temporal
	// protocols (what serve does) and ExcludeNone for KFold (what the
	// published protocol does).
	ExcludeDefault Exclusion = ""
	// ExcludeSession skips items already in the session, as serve does.
	ExcludeSession Exclusion = "session"
	// ExcludeNone lets a model answer with items already in the session.
	ExcludeNone Exclusion = "none"
)

// KFoldOptions configures the KFold protocol. The defaults are those of the
// published MSNBC check (see ../shared/data/README.md): consecutive repeats
// removed, the first 5,000 sessions of length 7 or more in log order,
// shuffled, 14 folds, the last 2 items as the target and up to 5 items
// before them as the context.
type KFoldOptions struct {
	Folds       int    `json:"folds"`
	MinLength   int    `json:"min_length"`
	MaxSessions int    `json:"max_sessions"` // 0 takes every qualifying session
	Targets     int    `json:"targets"`
	Context     int    `json:"context"`
	Seed        uint64 `json:"seed"`
}

// DefaultKFoldOptions returns the defaults documented on KFoldOptions.
func DefaultKFoldOptions() KFoldOptions {
	return KFoldOptions{Folds: 14, MinLength: 7, MaxSessions: 5000, Targets: 2, Context: 5, Seed: 1}
}

// Options configures Run.
type Options struct {
	Protocol Protocol
	Target   Target
	// Models are model specs, one per result, as ExpandModels returns them
	// (default: the serve blend). They share one pipeline, so a grid over
	// a parameter replays the log once and shared parts learn once.
	Models []string
	// K lists the cut-offs, ascending (default 1, 5, 10, 20).
	K []int
	// Pipeline holds the tracker, decay and model defaults, as serve uses
	// them (session.DefaultPipelineOptions); its Models field is ignored.
	Pipeline session.PipelineOptions
	Exclude  Exclusion

	// SplitAt is the temporal split time; TestDays instead puts it that
	// many days before the last event. Exactly one is set for Temporal.
	SplitAt  time.Time
	TestDays float64
	// LearnDuringTest keeps learning test sessions after scoring each
	// click (test-then-learn after the split).
	LearnDuringTest bool

	// MinSessionLength drops sessions with fewer clicks (default 1, keep
	// all; the session-based literature uses 2). MinItemSupport drops
	// items with fewer clicks in the training part (default 1; the
	// literature uses 5). DropUnseen drops test clicks on items the
	// training part never saw (temporal only). Each drop is counted.
	MinSessionLength int
	MinItemSupport   int
	DropUnseen       bool

	// ColdThreshold: a query's target is cold when it had fewer learned
	// clicks than this at query time (default 5).
	ColdThreshold int

	KFold KFoldOptions

	// Progress, when set, is called now and then with the events done and
	// the total, from the goroutine running Run.
	Progress func(done, total int64)
}

// DefaultOptions returns the defaults: prequential, next item, the serve
// blend, K = 1, 5, 10, 20, serve's pipeline defaults, nothing dropped.
func DefaultOptions() Options {
	return Options{
		Protocol:         Prequential,
		Target:           TargetNext,
		Models:           []string{models.DefaultBlendSpec},
		K:                []int{1, 5, 10, 20},
		Pipeline:         session.DefaultPipelineOptions(),
		MinSessionLength: 1,
		MinItemSupport:   1,
		ColdThreshold:    5,
		KFold:            DefaultKFoldOptions(),
	}
}

// MaxK bounds the cut-offs; serve answers at most 1000 items.
const MaxK = 1000

func bad(field, format string, args ...any) error {
	return fmt.Errorf("%w: %s: %s", ErrBadOption, field, fmt.Sprintf(format, args...))
}

// validate fills zero values from DefaultOptions and checks the rest.
func (o *Options) validate() error {
	d := DefaultOptions()
	if o.Protocol == "" {
		o.Protocol = d.Protocol
	}
	if o.Target == "" {
		o.Target = d.Target
	}
	if len(o.Models) == 0 {
		o.Models = d.Models
	}
	if len(o.K) == 0 {
		o.K = d.K
	}
	if o.MinSessionLength == 0 {
		o.MinSessionLength = d.MinSessionLength
	}
	if o.MinItemSupport == 0 {
		o.MinItemSupport = d.MinItemSupport
	}
	if o.ColdThreshold == 0 {
		o.ColdThreshold = d.ColdThreshold
	}
	kd := DefaultKFoldOptions()
	if o.KFold.Folds == 0 {
		o.KFold.Folds = kd.Folds
	}
	if o.KFold.MinLength == 0 {
		o.KFold.MinLength = kd.MinLength
	}
	if o.KFold.Targets == 0 {
		o.KFold.Targets = kd.Targets
	}
	if o.KFold.Context == 0 {
		o.KFold.Context = kd.Context
	}
	if o.Exclude == ExcludeDefault {
		o.Exclude = ExcludeSession
		if o.Protocol == KFold {
			o.Exclude = ExcludeNone
		}
	}
	switch o.Protocol {
	case Prequential, Temporal, KFold:
	default:
		return bad("Protocol", "%q is not one of prequential, temporal, kfold", o.Protocol)
	}
	switch o.Target {
	case TargetNext, TargetRest:
	default:
		return bad("Target", "%q is not one of next, rest", o.Target)
	}
	switch o.Exclude {
	case ExcludeSession, ExcludeNone:
	default:
		return bad("Exclude", "%q is not one of session, none", o.Exclude)
	}
	for i := 1; i < len(o.K); i++ {
		if o.K[i] <= o.K[i-1] {
			return bad("K", "%v must be ascending without repeats", o.K)
		}
	}
	if o.K[0] < 1 || o.K[len(o.K)-1] > MaxK {
		return bad("K", "%v must lie in 1..%d", o.K, MaxK)
	}
	seen := map[string]bool{}
	for _, m := range o.Models {
		if seen[m] {
			return bad("Models", "%q given twice", m)
		}
		seen[m] = true
	}
	temporal := o.Protocol == Temporal
	switch {
	case temporal && o.SplitAt.IsZero() == (o.TestDays == 0):
		return bad("SplitAt", "a temporal split needs exactly one of SplitAt and TestDays")
	case !temporal && (!o.SplitAt.IsZero() || o.TestDays != 0):
		return bad("SplitAt", "SplitAt and TestDays need the temporal protocol, not %s", o.Protocol)
	case o.TestDays < 0:
		return bad("TestDays", "%g is negative", o.TestDays)
	case o.LearnDuringTest && !temporal:
		return bad("LearnDuringTest", "needs the temporal protocol (prequential always learns; kfold never learns a test fold)")
	case o.DropUnseen && !temporal:
		return bad("DropUnseen", "needs the temporal protocol, where training and test are apart")
	case o.MinSessionLength < 1:
		return bad("MinSessionLength", "%d below 1", o.MinSessionLength)
	case o.MinItemSupport < 1:
		return bad("MinItemSupport", "%d below 1", o.MinItemSupport)
	case o.ColdThreshold < 1:
		return bad("ColdThreshold", "%d below 1", o.ColdThreshold)
	case o.Protocol == KFold && o.Target != TargetNext:
		return bad("Target", "kfold scores its own target, the last %d items of each test session", o.KFold.Targets)
	}
	if o.Protocol == KFold {
		k := o.KFold
		switch {
		case k.Folds < 2:
			return bad("KFold.Folds", "%d below 2", k.Folds)
		case k.Targets < 1:
			return bad("KFold.Targets", "%d below 1", k.Targets)
		case k.Context < 1:
			return bad("KFold.Context", "%d below 1", k.Context)
		case k.MinLength < k.Targets+1:
			return bad("KFold.MinLength", "%d leaves no context before %d targets", k.MinLength, k.Targets)
		case k.MaxSessions < 0:
			return bad("KFold.MaxSessions", "%d is negative", k.MaxSessions)
		}
	}
	return nil
}
