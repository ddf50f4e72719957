package session

import (
	"context"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"sync"
	"time"

	"github.com/prometheus/client_golang/prometheus"

	"waymark/store"
)

// Reasons the learned state cannot be trusted to take writes. Each is a
// value of the reason label of waymark_state_fault and of /readyz's
// "reason".
const (
	// FaultCheckpointAhead: the store has applied stream sequences the
	// stream does not hold (the stream folder was lost, the stream was
	// deleted and re-created, or --nats names another server). New
	// messages would get sequences the store believes applied.
	FaultCheckpointAhead = "checkpoint_ahead"
	// FaultStreamGap: the stream no longer holds messages the store has
	// not applied yet (retention or a purge dropped them).
	FaultStreamGap = "stream_gap"
	// FaultStreamRecreated: the stream is not the one the store was
	// learned from (its creation time differs from the checkpoint's).
	FaultStreamRecreated = "stream_recreated"
	// FaultNoSpace: the store's disk is full; consuming pauses and
	// resumes once a commit succeeds again.
	FaultNoSpace = "no_space"
)

var faultReasons = []string{FaultCheckpointAhead, FaultStreamGap, FaultStreamRecreated, FaultNoSpace}

// Fault is one reason the service refuses readiness and writes.
type Fault struct {
	Reason  string `json:"reason"`
	Message string `json:"message"`
}

// faults is the set of current faults, mirrored in a gauge.
type faults struct {
	mu    sync.Mutex
	set   map[string]string
	gauge *prometheus.GaugeVec
}

func newFaults(reg prometheus.Registerer) *faults {
	f := &faults{set: map[string]string{}, gauge: prometheus.NewGaugeVec(prometheus.GaugeOpts{
		Name: "waymark_state_fault",
		Help: "1 while the state cannot take writes for this reason (see /readyz): checkpoint_ahead, stream_gap, stream_recreated, no_space.",
	}, []string{"reason"})}
	for _, r := range faultReasons {
		f.gauge.WithLabelValues(r).Set(0)
	}
	if reg != nil {
		reg.MustRegister(f.gauge)
	}
	return f
}

// SetFault records a fault; the first report of a reason is logged at
// ERROR.
func (e *Engine) SetFault(reason, msg string) {
	f := e.faults
	f.mu.Lock()
	_, had := f.set[reason]
	f.set[reason] = msg
	f.mu.Unlock()
	f.gauge.WithLabelValues(reason).Set(1)
	if !had {
		e.log.Error("not ready: "+msg, "reason", reason)
	}
}

// ClearFault ends a fault.
func (e *Engine) ClearFault(reason string) {
	f := e.faults
	f.mu.Lock()
	_, had := f.set[reason]
	delete(f.set, reason)
	f.mu.Unlock()
	f.gauge.WithLabelValues(reason).Set(0)
	if had {
		e.log.Info("fault cleared", "reason", reason)
	}
}

// Faults returns the current faults by reason; none means the state takes
// writes.
func (e *Engine) Faults() []Fault {
	if e == nil || e.faults == nil {
		return nil
	}
	f := e.faults
	f.mu.Lock()
	defer f.mu.Unlock()
	out := make([]Fault, 0, len(f.set))
	for r, m := range f.set {
		out = append(out, Fault{Reason: r, Message: m})
	}
	slices.SortFunc(out, func(a, b Fault) int { return strings.Compare(a.Reason, b.Reason) })
	return out
}

// faultText joins the faults' messages for a log line or an error.
func faultText(fs []Fault) string {
	msgs := make([]string, len(fs))
	for i, f := range fs {
		msgs[i] = f.Message
	}
	return strings.Join(msgs, "; ")
}

// streamState is what the service checks of the events stream.
type streamState struct {
	first, last uint64
	id          string // the stream's creation time: a re-created stream has another
}

func (s *Service) streamState(ctx context.Context) (streamState, error) {
	js, name := s.bus.JetStream(), s.bus.Options().Stream
	st, err := js.Stream(ctx, name)
	if err != nil {
		return streamState{}, fmt.Errorf("stream %s info: %w", name, err)
	}
	info := st.CachedInfo()
	return streamState{first: info.State.FirstSeq, last: info.State.LastSeq, id: streamID(info.Created)}, nil
}

func streamID(created time.Time) string { return created.UTC().Format(time.RFC3339Nano) }

// rebuildHint is the way out every stream fault names.
const rebuildHint = "restart with --rebuild-from-stream to discard the learned state and relearn the stream as it is now, or point --nats at the stream this state was learned from"

// checkStream compares the stream with the state, which has applied every
// message up to seq and was learned from the stream with id storedID
// (empty: not recorded). It returns a fault reason and message, or "".
func checkStream(seq uint64, storedID string, st streamState) (string, string) {
	if seq > 0 && st.last < seq {
		return FaultCheckpointAhead, fmt.Sprintf("the state has applied the events stream up to sequence %d, but the stream ends at %d (stream folder lost, stream re-created or wrong --nats): writes would never be applied; %s",
			seq, st.last, rebuildHint)
	}
	if seq > 0 && st.first > seq+1 {
		return FaultStreamGap, fmt.Sprintf("the events stream starts at sequence %d, but the state has applied only up to %d: sequences %d to %d were dropped before they were learned; %s",
			st.first, seq, seq+1, st.first-1, rebuildHint)
	}
	if storedID != "" && st.id != storedID {
		return FaultStreamRecreated, fmt.Sprintf("the events stream was created at %s, but the state was learned from one created at %s: %s",
			st.id, storedID, rebuildHint)
	}
	return "", ""
}

// openStore opens the store. A store that reports itself corrupt is
// returned as damaged, for rebuildDamaged to decide once the stream is
// known.
func (s *Service) openStore(ctx context.Context, so store.Options) (st *store.Store, damaged, err error) {
	st, err = store.Open(ctx, filepath.Join(s.opts.DataDir, "store"), so)
	if err != nil && errors.Is(err, store.ErrCorrupt) {
		return nil, err, nil
	}
	return st, nil, err
}

// canRebuild tells whether damaged state may be discarded and relearned:
// when the operator asks for it, or when the stream still holds every
// message since sequence 1, so relearning gives exactly the lost state.
func (s *Service) canRebuild(ctx context.Context, damage error) error {
	if s.opts.RebuildFromStream {
		s.log.Warn("rebuild-from-stream: the stored state is damaged; discarding it and relearning the stream as it is now", "err", damage)
		return nil
	}
	c, cancel := context.WithTimeout(ctx, 10*time.Second)
	defer cancel()
	st, err := s.streamState(c)
	if err != nil {
		return fmt.Errorf("%w (and the stream cannot be read to rebuild it: %v)", damage, err)
	}
	if st.first > 1 || st.last == 0 {
		return fmt.Errorf("%w; the events stream no longer holds every message since sequence 1 (it holds %d to %d), so it cannot be rebuilt exactly: restart with --rebuild-from-stream to relearn what the stream holds, or start an empty data folder with --bootstrap", damage, st.first, st.last)
	}
	s.log.Warn("the stored state is damaged; rebuilding it from the events stream, which holds every message since sequence 1", "err", damage, "stream_last", st.last)
	return nil
}

// rebuildDamaged replaces a store that does not open with an empty one,
// when canRebuild allows.
func (s *Service) rebuildDamaged(ctx context.Context, so store.Options, damage error) (*store.Store, error) {
	if err := s.canRebuild(ctx, damage); err != nil {
		return nil, err
	}
	dir := filepath.Join(s.opts.DataDir, "store")
	if err := os.RemoveAll(dir); err != nil {
		return nil, fmt.Errorf("rebuild: delete %s: %w", dir, err)
	}
	return store.Open(ctx, dir, so)
}

// checkStart compares the stored state with the events stream before
// anything is consumed. It returns a fault that keeps the service from
// consuming and taking writes, or wipes the state first when
// RebuildFromStream asks for it.
func (s *Service) checkStart(ctx context.Context) (reason, msg string, err error) {
	cp, err := s.st.Checkpoint()
	if err != nil {
		return "", "", err
	}
	c, cancel := context.WithTimeout(ctx, 10*time.Second)
	defer cancel()
	st, err := s.streamState(c)
	if err != nil {
		return "", "", err
	}
	s.streamID = st.id
	reason, msg = checkStream(cp.Seq, cp.Stream, st)
	switch {
	case reason == "":
		if s.opts.RebuildFromStream && cp.Seq > 0 {
			s.log.Info("rebuild-from-stream: the state continues the stream; nothing to rebuild", "seq", cp.Seq, "stream_last", st.last)
		}
		return "", "", nil
	case s.opts.RebuildFromStream:
		s.log.Warn("rebuild-from-stream: discarding the learned state and relearning the stream as it is now",
			"reason", reason, "seq", cp.Seq, "stream_first", st.first, "stream_last", st.last)
		if err := s.st.Wipe(); err != nil {
			return "", "", err
		}
		return "", "", nil
	}
	return reason, msg, nil
}
