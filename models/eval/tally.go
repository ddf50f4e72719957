package eval

import (
	"sync"

	"waymark/models"
)

// tallyBatchOps is how many queries and learned clicks one batch carries
// to the tallier's goroutine: enough that the hand-over costs nothing next
// to the work, few enough to stay in cache (about 100 KB of answers).
const tallyBatchOps = 1024

// tallyDepth is how many full batches may wait for the tallier's
// goroutine before the replay waits for it.
const tallyDepth = 4

// learnedOp marks a tallyOp that is a learned click, not a query.
const learnedOp = -1

// tallyOp is one query whose answers wait in its batch, or one learned
// click, in replay order.
type tallyOp struct {
	at   int    // event index, for the rest-of-session target
	next uint32 // the clicked log item: the query's target, or the item learned
	in   int32  // session instance, for the rest-of-session target
	pos  int32  // clicks before the query; learnedOp for a learned click
}

type tallyBatch struct {
	ops []tallyOp
	ans []uint32 // the queries' answers, as ask writes them, query after query
	// logOf holds the log item (or -1) of each dictionary id interned
	// since the batch before, in id order: the tallier's map from the ids
	// answered to log items grows by it before the batch is tallied.
	logOf []int32
}

// tallier scores a stream replay's queries on a goroutine of its own: the
// replay's goroutine asks the models (evaluator.ask) and queues the answers
// with the clicks learned between them, and the tallier's goroutine
// updates the metrics, popularity counts and coverage (evaluator.tally,
// evaluator.learned) in the same order, so the scores are those of doing
// both on one goroutine. A replay is learning and asking, strictly in
// turn: scoring is the one part that can overlap them. The evaluator's
// accounting (popCount, maxPop, each model's sums, best and rr) belongs to
// the tallier's goroutine until wait returns; ask touches only the models
// and each model's latency and buffer. The answers carry dictionary ids:
// the replay's goroutine, which owns the dictionary, sends the log item of
// each newly interned id with the batch, and the tallier maps them (a
// lookup per answered item, moved off the replay's goroutine with the
// rest).
type tallier struct {
	e    *evaluator
	rest *restIndex // nil: the target is the next click
	cur  *tallyBatch
	out  chan *tallyBatch
	free chan *tallyBatch
	wg   sync.WaitGroup
	done bool // wait has run
	// mapped counts the dictionary ids whose log items have been sent; it
	// belongs to the replay's goroutine, which owns the dictionary.
	mapped int
	// logOf is the tallier goroutine's map from dictionary ids to log
	// items, grown by each batch.
	logOf []int32

	// On the tallier's goroutine: the next-click target of the query being
	// tallied, and isTarget bound to it once (a closure per query would be
	// an allocation per query).
	target   uint32
	isTarget func(uint32) bool
}

func startTallier(e *evaluator, rest *restIndex) *tallier {
	t := &tallier{
		e:    e,
		rest: rest,
		cur:  newTallyBatch(),
		out:  make(chan *tallyBatch, tallyDepth),
		free: make(chan *tallyBatch, tallyDepth+2),
	}
	t.isTarget = func(li uint32) bool { return li == t.target }
	t.wg.Add(1)
	go t.run()
	return t
}

func newTallyBatch() *tallyBatch {
	return &tallyBatch{ops: make([]tallyOp, 0, tallyBatchOps)}
}

// query asks every model q, as evaluator.score does, and queues the
// answers for scoring: at and in are the click's event index and session
// instance, next its log item, pos the clicks before it.
func (t *tallier) query(q *models.Query, skip func(models.ItemID) bool, at int, in int32, next uint32, pos int) {
	b := t.cur
	b.ans = t.e.ask(q, skip, b.ans)
	b.ops = append(b.ops, tallyOp{at: at, next: next, in: in, pos: int32(pos)})
	if len(b.ops) == tallyBatchOps {
		t.send()
	}
}

// learned queues a learned click of log item li (evaluator.learned).
func (t *tallier) learned(li uint32) {
	b := t.cur
	b.ops = append(b.ops, tallyOp{next: li, pos: learnedOp})
	if len(b.ops) == tallyBatchOps {
		t.send()
	}
}

func (t *tallier) send() {
	// Every id answered so far was interned by now: map them all.
	e := t.e
	for ; t.mapped < e.dict.Len(); t.mapped++ {
		li, ok := e.itemOf[e.dict.Name(uint32(t.mapped))]
		if !ok {
			t.cur.logOf = append(t.cur.logOf, -1)
		} else {
			t.cur.logOf = append(t.cur.logOf, int32(li))
		}
	}
	t.out <- t.cur
	select {
	case t.cur = <-t.free:
		t.cur.ops, t.cur.ans, t.cur.logOf = t.cur.ops[:0], t.cur.ans[:0], t.cur.logOf[:0]
	default:
		t.cur = newTallyBatch()
	}
}

// wait scores everything queued and returns once the tallier's goroutine
// has stopped; the evaluator's accounting is then the caller's again. No
// query or learned may follow; calling it again does nothing.
func (t *tallier) wait() {
	if t.done {
		return
	}
	t.done = true
	if len(t.cur.ops) > 0 {
		t.send()
	}
	close(t.out)
	t.wg.Wait()
}

func (t *tallier) run() {
	defer t.wg.Done()
	e := t.e
	for b := range t.out {
		t.logOf = append(t.logOf, b.logOf...)
		ans := b.ans
		for _, op := range b.ops {
			if op.pos == learnedOp {
				e.learned(op.next)
				continue
			}
			rel, nRel := t.isTarget, 1
			if t.rest != nil {
				rel, nRel = t.rest.at(op.at, op.in)
			} else {
				t.target = op.next
			}
			ans = e.tally(ans, t.logOf, rel, nRel, op.next, int(op.pos))
		}
		select {
		case t.free <- b:
		default:
		}
	}
}
