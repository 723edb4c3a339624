package ingest

import (
	"strings"
	"testing"
	"time"
)

func TestLineProgressRateLimit(t *testing.T) {
	var buf strings.Builder
	now := time.Date(2020, 1, 1, 0, 0, 0, 0, time.UTC)
	p := NewLineProgress(&buf, func() time.Time { return now })
	p.Start("h.osh", 2_000_000)
	// 50 updates 10 ms apart span half a second: at most 5 redraws a second
	// gives 3 (at 0, 200 and 400 ms).
	for i := range 50 {
		p.Update(int64(i)*20_000, int64(i)*1000)
		now = now.Add(10 * time.Millisecond)
	}
	if n := strings.Count(buf.String(), "\r"); n != 3 {
		t.Errorf("%d redraws, want 3:\n%q", n, buf.String())
	}
	p.Finish()
	if !strings.HasSuffix(buf.String(), "\r") {
		t.Error("Finish does not clear the line")
	}
}

func TestProgressLine(t *testing.T) {
	cases := []struct {
		name                 string
		done, total, objects int64
		elapsed              time.Duration
		want                 string
	}{
		{"half", 1_000_000, 2_000_000, 300_000, 2 * time.Second,
			"f  [##########----------]  50%  1.0 MB/2.0 MB  150 k obj/s  0:02"},
		{"done, long", 2_000_000, 2_000_000, 1_000, 125 * time.Second,
			"f  [####################] 100%  2.0 MB/2.0 MB  8 obj/s  2:05"},
		{"unknown size", 10, 0, 0, 0,
			"f  [--------------------]   0%  10 B/0 B  0 obj/s  0:00"},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			if got := progressLine("f", tc.done, tc.total, tc.objects, tc.elapsed); got != tc.want {
				t.Errorf("got  %q\nwant %q", got, tc.want)
			}
		})
	}
}
