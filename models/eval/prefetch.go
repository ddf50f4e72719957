package eval

import (
	"sync"

	"waymark/stream"
)

// prefetchBatch is how many records one batch carries: enough that handing
// a batch between goroutines costs nothing next to decoding it, few enough
// that the batches in flight stay small (about 300 KB each).
const prefetchBatch = 4096

// prefetchDepth is how many full batches may wait for the reader of the
// log: one being filled and this many queued keep the decoder busy while
// the builder interns.
const prefetchDepth = 2

// fetched is what the source gave in one batch, in order: its events, the
// bad records between them, and what came with each event.
type fetched struct {
	evs []stream.Event
	// lines holds, per event, the source's line number after reading it,
	// when the source counts lines (the order error names the line).
	lines []int
	// notes are the bad records and catalogue records, in order, each
	// placed by the number of events of the batch read before it.
	notes []fetchNote
	// err is the error that ended the source after the batch's records:
	// io.EOF at its end, or a failure; nil when more follows.
	err error
}

type fetchNote struct {
	at    int   // events of the batch before this note
	bad   error // a bad record, or nil
	items []stream.ItemRecord
	// itemsOf says items came with event at (read just before the note)
	// rather than being a bad record.
	itemsOf bool
}

// prefetcher reads a source on its own goroutine, so decoding the next
// records (about half of reading a file) overlaps interning the ones before
// them on the caller's. Only the prefetcher's goroutine calls the source;
// stop waits for it to return, so the caller may close the source after.
type prefetcher struct {
	out  chan *fetched
	free chan *fetched
	done chan struct{}
	wg   sync.WaitGroup
}

func startPrefetch(r stream.Reader) *prefetcher {
	p := &prefetcher{
		out:  make(chan *fetched, prefetchDepth),
		free: make(chan *fetched, prefetchDepth+2),
		done: make(chan struct{}),
	}
	p.wg.Add(1)
	go p.run(r)
	return p
}

func (p *prefetcher) run(r stream.Reader) {
	defer p.wg.Done()
	defer close(p.out)
	lr, _ := r.(liner)
	taker, _ := r.(itemTaker)
	for {
		var b *fetched
		select {
		case b = <-p.free:
			b.evs, b.lines, b.notes, b.err = b.evs[:0], b.lines[:0], b.notes[:0], nil
		default:
			b = &fetched{evs: make([]stream.Event, 0, prefetchBatch)}
		}
		for n := 0; n < prefetchBatch; n++ {
			ev, err := r.Next()
			if err != nil {
				if isBadRecord(err) {
					b.notes = append(b.notes, fetchNote{at: len(b.evs), bad: err})
					continue
				}
				b.err = err
				break
			}
			b.evs = append(b.evs, ev)
			if lr != nil {
				b.lines = append(b.lines, lr.Line())
			}
			if taker != nil {
				if items := taker.TakeItems(); len(items) > 0 {
					b.notes = append(b.notes, fetchNote{at: len(b.evs) - 1, items: items, itemsOf: true})
				}
			}
		}
		select {
		case p.out <- b:
		case <-p.done:
			return
		}
		if b.err != nil {
			return
		}
	}
}

// next returns the next batch; ok is false once the source has ended and
// every batch was taken.
func (p *prefetcher) next() (b *fetched, ok bool) {
	b, ok = <-p.out
	return b, ok
}

// recycle returns a batch the caller is done with.
func (p *prefetcher) recycle(b *fetched) {
	clear(b.notes) // the catalogue records belong to the log now
	select {
	case p.free <- b:
	default:
	}
}

// stop ends the goroutine and waits for it; call it once, when done.
func (p *prefetcher) stop() {
	close(p.done)
	p.wg.Wait()
}
