package ingest

import (
	"fmt"
	"io"
	"strings"
	"sync"
	"time"

	"github.com/dustin/go-humanize"
)

// Progress hears how an ingest advances. Start is called when a file is
// opened, with its size in bytes; Update after each committed batch with the
// compressed bytes read so far and the items read so far of that file; Finish
// when the file is done or abandoned. Calls come from the ingesting goroutine.
type Progress interface {
	Start(name string, totalBytes int64)
	Update(bytesRead, objects int64)
	Finish()
}

// NopProgress is a Progress that does nothing.
type NopProgress struct{}

// Start does nothing.
func (NopProgress) Start(string, int64) {}

// Update does nothing.
func (NopProgress) Update(int64, int64) {}

// Finish does nothing.
func (NopProgress) Finish() {}

// LineProgress draws a one-line progress display on a terminal, redrawn in
// place with a carriage return at most every Interval:
//
//	delaware.osm.pbf  [#########-----------]  45%  6.1 MB/14 MB  412.3 k obj/s  0:02
//
// It is safe for use by one ingest at a time.
type LineProgress struct {
	w        io.Writer
	now      func() time.Time
	interval time.Duration

	mu      sync.Mutex
	name    string
	total   int64
	started time.Time
	last    time.Time
	width   int // length of the last line drawn
}

// NewLineProgress returns a LineProgress writing to w (a terminal) at most
// five times a second. now is the clock; nil means time.Now.
func NewLineProgress(w io.Writer, now func() time.Time) *LineProgress {
	if now == nil {
		now = time.Now
	}
	return &LineProgress{w: w, now: now, interval: 200 * time.Millisecond}
}

// Start begins a line for a file of total bytes.
func (p *LineProgress) Start(name string, total int64) {
	p.mu.Lock()
	defer p.mu.Unlock()
	p.name, p.total = name, total
	p.started = p.now()
	p.last = time.Time{}
	p.width = 0
}

// Update redraws the line unless it was drawn less than the interval ago.
func (p *LineProgress) Update(bytesRead, objects int64) {
	p.mu.Lock()
	defer p.mu.Unlock()
	now := p.now()
	if !p.last.IsZero() && now.Sub(p.last) < p.interval {
		return
	}
	p.last = now
	line := progressLine(p.name, bytesRead, p.total, objects, now.Sub(p.started))
	pad := ""
	if n := p.width - len(line); n > 0 {
		pad = strings.Repeat(" ", n)
	}
	p.width = len(line)
	fmt.Fprintf(p.w, "\r%s%s", line, pad)
}

// Finish clears the line.
func (p *LineProgress) Finish() {
	p.mu.Lock()
	defer p.mu.Unlock()
	if p.width > 0 {
		fmt.Fprintf(p.w, "\r%s\r", strings.Repeat(" ", p.width))
	}
	p.width = 0
}

const barWidth = 20

// progressLine formats one progress line.
func progressLine(name string, done, total, objects int64, elapsed time.Duration) string {
	frac := 0.0
	if total > 0 {
		frac = min(float64(done)/float64(total), 1)
	}
	filled := int(frac * barWidth)
	rate := 0.0
	if s := elapsed.Seconds(); s > 0 {
		rate = float64(objects) / s
	}
	secs := int64(elapsed.Seconds())
	return fmt.Sprintf("%s  [%s%s] %3.0f%%  %s/%s  %s obj/s  %d:%02d",
		name, strings.Repeat("#", filled), strings.Repeat("-", barWidth-filled), frac*100,
		humanize.Bytes(uint64(max(done, 0))), humanize.Bytes(uint64(max(total, 0))), strings.TrimSpace(humanize.SIWithDigits(rate, 1, "")), secs/60, secs%60)
}
