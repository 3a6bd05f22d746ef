package main

import (
	"io"
	"os"
	"sync"
	"time"

	"github.com/schollz/progressbar/v3"
)

// progress is the bar replay, simulate and demo draw on standard error
// while they run: done/total with the rate and the time left. It draws only
// when the writer is a terminal, so logs, pipes and tests stay clean; the
// zero value and a nil *progress draw nothing. Safe for concurrent use.
type progress struct {
	mu    sync.Mutex
	w     io.Writer
	what  string
	bytes bool
	bar   *progressbar.ProgressBar
}

// newProgress is a bar counting items (messages) for what; nil when w is
// not a terminal.
func newProgress(w io.Writer, what string) *progress {
	if !isTerminal(w) || os.Getenv("TERM") == "dumb" {
		return nil
	}
	return &progress{w: w, what: what}
}

// newBytesProgress is a bar counting bytes; nil when w is not a terminal.
func newBytesProgress(w io.Writer, what string) *progress {
	p := newProgress(w, what)
	if p != nil {
		p.bytes = true
	}
	return p
}

// set moves the bar to done of total (total < 0: unknown, a spinner).
func (p *progress) set(done, total int) {
	if p == nil {
		return
	}
	p.mu.Lock()
	defer p.mu.Unlock()
	if p.bar == nil {
		opts := []progressbar.Option{
			progressbar.OptionSetWriter(p.w),
			progressbar.OptionSetDescription(p.what),
			progressbar.OptionSetWidth(30),
			progressbar.OptionShowCount(),
			progressbar.OptionSetPredictTime(true),
			progressbar.OptionSetElapsedTime(true),
			progressbar.OptionThrottle(100 * time.Millisecond),
			progressbar.OptionClearOnFinish(),
		}
		if p.bytes {
			opts = append(opts, progressbar.OptionShowBytes(true))
		} else {
			opts = append(opts, progressbar.OptionShowIts(), progressbar.OptionSetItsString("msg"))
		}
		p.bar = progressbar.NewOptions64(int64(total), opts...)
	}
	_ = p.bar.Set64(int64(done))
}

// done clears the bar so the command's own output starts on a clean line.
func (p *progress) done() {
	if p == nil {
		return
	}
	p.mu.Lock()
	defer p.mu.Unlock()
	if p.bar != nil {
		_ = p.bar.Finish()
		_ = p.bar.Clear()
	}
}

// spin shows a spinner with the elapsed time until stop is called, for
// work that reports no progress of its own.
func (p *progress) spin() (stop func()) {
	if p == nil {
		return func() {}
	}
	quit, finished := make(chan struct{}), make(chan struct{})
	go func() {
		defer close(finished)
		t := time.NewTicker(100 * time.Millisecond)
		defer t.Stop()
		for {
			p.set(0, -1) // a spinner redraws on every call
			select {
			case <-quit:
				return
			case <-t.C:
			}
		}
	}()
	return func() {
		close(quit)
		<-finished
		p.done()
	}
}

// progressReader counts the bytes read through it into a bar.
type progressReader struct {
	r       io.Reader
	p       *progress
	n, size int64
}

func (r *progressReader) Read(b []byte) (int, error) {
	n, err := r.r.Read(b)
	r.n += int64(n)
	r.p.set(int(r.n), int(r.size))
	return n, err
}
