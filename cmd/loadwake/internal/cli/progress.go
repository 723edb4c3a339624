package cli

import (
	"io"
	"os"
	"path/filepath"
	"sync"
	"time"

	"github.com/paulmach/osm"
	"github.com/rivo/uniseg"
	"github.com/schollz/progressbar/v3"
	"github.com/spf13/cobra"
	"golang.org/x/term"

	"github.com/loadwake/loadwake/ingest"
)

// Progress draws the progress of long steps on stderr, one line redrawn in
// place, when stderr is a terminal and --quiet is off; otherwise it draws
// nothing. Bars fit the terminal's width: descriptions are shortened, never
// wrapped.
type Progress struct {
	w        io.Writer     // nil: silent
	width    int           // columns of the terminal
	throttle time.Duration // least time between redraws
}

// NewProgress returns the progress display of cmd's stderr.
func NewProgress(cmd *cobra.Command, g *Globals) *Progress {
	f, ok := cmd.ErrOrStderr().(*os.File)
	if g.Quiet || !ok || !term.IsTerminal(int(f.Fd())) {
		return &Progress{}
	}
	w, _, err := term.GetSize(int(f.Fd()))
	if err != nil || w <= 0 {
		w = 80
	}
	return &Progress{w: f, width: w, throttle: 100 * time.Millisecond}
}

// Room for what the library draws besides the description and the bar:
// percentage, counts, rate and [elapsed:left] on a wide terminal; the
// percentage and [elapsed:left] alone on a narrow one.
const (
	progressStatsWide   = 46
	progressStatsNarrow = 24
	progressNarrow      = 72 // terminals narrower than this get the short form
)

// Bar returns a bar counting total items with an ETA (silent when stderr is
// not a terminal); the caller sets, finishes and exits it.
func (p *Progress) Bar(desc string, total int64) *progressbar.ProgressBar {
	return p.bar(desc, total, false)
}

// bar returns a bar counting to total (bytes when isBytes), with an ETA, or a
// spinner with the elapsed time when total is negative.
func (p *Progress) bar(desc string, total int64, isBytes bool) *progressbar.ProgressBar {
	if p.w == nil {
		return progressbar.DefaultSilent(total)
	}
	narrow := p.width < progressNarrow
	stats := progressStatsWide
	if narrow {
		stats = progressStatsNarrow
	}
	desc = FitText(desc, max(8, min(p.width/3, p.width-stats-6)))
	barWidth := min(40, p.width-uniseg.StringWidth(desc)-stats)
	opts := []progressbar.Option{
		progressbar.OptionSetWriter(p.w),
		progressbar.OptionSetDescription(desc),
		progressbar.OptionSetWidth(max(barWidth, 3)),
		progressbar.OptionUseANSICodes(true),
		progressbar.OptionThrottle(p.throttle),
		progressbar.OptionClearOnFinish(),
		progressbar.OptionSetRenderBlankState(true),
	}
	if total < 0 {
		opts = append(opts, progressbar.OptionSpinnerType(14), progressbar.OptionSetElapsedTime(true))
	} else {
		opts = append(opts, progressbar.OptionSetPredictTime(true), progressbar.OptionShowBytes(isBytes && !narrow),
			progressbar.OptionShowTotalBytes(!narrow))
		if !narrow {
			opts = append(opts, progressbar.OptionShowCount())
		}
		if !isBytes && !narrow {
			opts = append(opts, progressbar.OptionShowIts(), progressbar.OptionSetItsString("v"))
		}
	}
	return progressbar.NewOptions64(total, opts...)
}

// Step shows a spinner with the elapsed time while a step of unknown length
// runs; call the returned function when the step ends.
func (p *Progress) Step(desc string) (done func()) {
	if p.w == nil {
		return func() {}
	}
	b := p.bar(desc, -1, false)
	return func() {
		b.Finish()
		b.Exit()
	}
}

// FitText shortens s to at most n columns, ending it with "…".
func FitText(s string, n int) string {
	if uniseg.StringWidth(s) <= n {
		return s
	}
	out, w := []rune{}, 0
	for _, r := range s {
		rw := uniseg.StringWidth(string(r))
		if w+rw > n-1 {
			break
		}
		out = append(out, r)
		w += rw
	}
	return string(out) + "…"
}

// ingestProgress is an ingest.Progress drawing one bar per file, named by
// the file's base name, counting compressed bytes read.
type ingestProgress struct {
	p   *Progress
	mu  sync.Mutex
	bar *progressbar.ProgressBar
}

var _ ingest.Progress = (*ingestProgress)(nil)

// Ingest returns the ingest.Progress of this display, nil when silent.
func (p *Progress) Ingest() ingest.Progress {
	if p.w == nil {
		return nil
	}
	return &ingestProgress{p: p}
}

// Start begins the bar of a file of total bytes.
func (ip *ingestProgress) Start(name string, total int64) {
	ip.mu.Lock()
	defer ip.mu.Unlock()
	ip.bar = ip.p.bar("ingest "+filepath.Base(name), total, true)
}

// Update sets the bar to the bytes read so far.
func (ip *ingestProgress) Update(bytesRead, _ int64) {
	ip.mu.Lock()
	defer ip.mu.Unlock()
	if ip.bar != nil {
		ip.bar.Set64(bytesRead)
	}
}

// Finish clears the bar.
func (ip *ingestProgress) Finish() {
	ip.mu.Lock()
	defer ip.mu.Unlock()
	if ip.bar != nil {
		ip.bar.Exit()
		ip.bar = nil
	}
}

// Classify returns the progress hook of layers.Options counting versions
// classified out of total (all versions in the store; negative when
// unknown), and the function that clears the bar. Hooks report the versions
// of each type so far; types come one after another.
func (p *Progress) Classify(total int64) (hook func(t osm.Type, n int64), done func()) {
	if p.w == nil {
		return nil, func() {}
	}
	b := p.bar("classify edits", total, false)
	var mu sync.Mutex
	var before int64 // versions of the types already done
	var cur osm.Type
	var last int64
	hook = func(t osm.Type, n int64) {
		mu.Lock()
		defer mu.Unlock()
		if t != cur {
			before += last
			cur, last = t, 0
		}
		last = n
		b.Set64(before + n)
	}
	return hook, func() { b.Exit() }
}
