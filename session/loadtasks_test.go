package session

import (
	"context"
	"errors"
	"runtime"
	"sync"
	"sync/atomic"
	"testing"
	"time"
)

// TestRunTasksErrorWithWorkers checks that with several workers the error
// still comes back, whichever task fails first.
func TestRunTasksErrorWithWorkers(t *testing.T) {
	boom := errors.New("boom")
	tasks := make([]func(context.Context) error, 6)
	for i := range tasks {
		tasks[i] = func(context.Context) error { return boom }
	}
	if err := runTasks(context.Background(), 2, tasks); !errors.Is(err, boom) {
		t.Fatalf("err %v, want boom", err)
	}
}

// TestRunTasks checks the restart's task runner: every task runs once,
// exactly min(workers, tasks) run at a time, and the first error stops the
// tasks not yet started (common practice for a bounded worker group).
func TestRunTasks(t *testing.T) {
	boom := errors.New("boom")
	cases := []struct {
		name    string
		workers int
		n       int
		failAt  int // index of the failing task, -1 for none
	}{
		{"one worker", 1, 5, -1},
		{"two workers", 2, 7, -1},
		{"more workers than tasks", 8, 3, -1},
		{"no workers given", 0, 3, -1},
		{"first task fails", 1, 5, 0},
		{"middle task fails", 1, 9, 4},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			var (
				ran        = make([]int32, tc.n)
				running    atomic.Int32
				maxRunning atomic.Int32
				mu         sync.Mutex
			)
			expect := int32(min(max(tc.workers, 1), tc.n))
			tasks := make([]func(context.Context) error, tc.n)
			for i := range tasks {
				tasks[i] = func(ctx context.Context) error {
					r := running.Add(1)
					defer running.Add(-1)
					mu.Lock()
					if r > maxRunning.Load() {
						maxRunning.Store(r)
					}
					mu.Unlock()
					// Hold the first tasks until as many run at once as
					// there are workers, so the bound is really reached.
					deadline := time.Now().Add(5 * time.Second)
					for maxRunning.Load() < expect && time.Now().Before(deadline) {
						runtime.Gosched()
					}
					atomic.AddInt32(&ran[i], 1)
					if i == tc.failAt {
						return boom
					}
					return nil
				}
			}
			err := runTasks(context.Background(), tc.workers, tasks)
			if tc.failAt < 0 {
				if err != nil {
					t.Fatalf("err %v, want nil", err)
				}
				for i, r := range ran {
					if r != 1 {
						t.Errorf("task %d ran %d times, want 1", i, r)
					}
				}
			} else {
				if !errors.Is(err, boom) {
					t.Fatalf("err %v, want boom", err)
				}
				// One worker takes the tasks in order: none after the
				// failing one starts.
				for i, r := range ran {
					want := int32(0)
					if i <= tc.failAt {
						want = 1
					}
					if r != want {
						t.Errorf("task %d ran %d times, want %d (task %d fails)", i, r, want, tc.failAt)
					}
				}
			}
			if maxRunning.Load() != expect {
				t.Errorf("%d tasks ran at once, want %d", maxRunning.Load(), expect)
			}
		})
	}
}
