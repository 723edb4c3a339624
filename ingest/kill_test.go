package ingest

import (
	"context"
	"errors"
	"math/rand/v2"
	"os"
	"os/exec"
	"path/filepath"
	"testing"
	"time"
)

// Environment of the child process of TestIngestKilled.
const (
	killChildDir  = "LOADWAKE_KILL_CHILD_STORE"
	killChildPath = "LOADWAKE_KILL_CHILD_PATH"
)

// killOptions are the ingest options of both the child and the clean run:
// small batches and a small sort buffer, so that a kill can land between
// commits and between spilled runs.
func killOptions(path string) IngestOptions {
	o := IngestOptions{BatchEntries: 50, SortBufferBytes: 32 << 10}
	if path == "transactional" {
		o.Path = WriteTransactional
	}
	return o
}

// TestIngestKillChild is the process TestIngestKilled kills; it does nothing
// unless started by it.
func TestIngestKillChild(t *testing.T) {
	dir := os.Getenv(killChildDir)
	if dir == "" {
		t.Skip("runs as the child of TestIngestKilled")
	}
	s, err := Open(dir, DefaultOptions())
	if err != nil {
		t.Fatal(err)
	}
	if _, err := Ingest(context.Background(), s, fixturePaths(), killOptions(os.Getenv(killChildPath))); err != nil {
		t.Fatal(err)
	}
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
}

// TestIngestKilled kills an ingest with SIGKILL at random moments, several
// times over the same store, then lets one run to the end: the store must
// then hold exactly what a clean ingest stores (file records compared by
// their total of new and duplicate versions, which the interruptions split
// differently). On the bulk path a kill while it writes leaves the marker:
// reads refuse the store with ErrInterrupted until the rerun.
func TestIngestKilled(t *testing.T) {
	if os.Getenv(killChildDir) != "" {
		t.Skip("in the child")
	}
	kills := killRuns
	if testing.Short() {
		kills = 1
	}
	for i, path := range []string{"bulk", "transactional"} {
		t.Run(path, func(t *testing.T) {
			clean := t.TempDir()
			ingestInto(t, clean, fixturePaths(), killOptions(path))
			want := dumpDir(t, clean, true)

			child := func(dir string) *exec.Cmd {
				cmd := exec.Command(os.Args[0], "-test.run=^TestIngestKillChild$", "-test.count=1")
				cmd.Env = append(os.Environ(), killChildDir+"="+dir, killChildPath+"="+path)
				return cmd
			}
			// how long a whole child run takes, start-up included
			start := time.Now()
			if out, err := child(t.TempDir()).CombinedOutput(); err != nil {
				t.Fatalf("child: %v\n%s", err, out)
			}
			full := time.Since(start)

			rng := rand.New(rand.NewPCG(uint64(i)+1, 7))
			dir := t.TempDir()
			interrupted := 0
			for range kills {
				cmd := child(dir)
				if err := cmd.Start(); err != nil {
					t.Fatal(err)
				}
				time.Sleep(time.Duration(rng.Int64N(int64(full))))
				cmd.Process.Kill() // SIGKILL
				cmd.Wait()
				if _, err := os.Stat(filepath.Join(dir, bulkMarker)); err != nil {
					continue
				}
				interrupted++
				s, err := Open(dir, DefaultOptions())
				if err != nil {
					t.Fatalf("open after a kill: %v", err)
				}
				if _, err := s.Stats(context.Background()); !errors.Is(err, ErrInterrupted) {
					t.Errorf("stats of an interrupted bulk store: %v, want ErrInterrupted", err)
				}
				s.Close()
			}
			t.Logf("%d kills in %v runs, %d left an interrupted bulk write", kills, full.Round(time.Millisecond), interrupted)
			ingestInto(t, dir, fixturePaths(), killOptions(path))
			if got := dumpDir(t, dir, true); got != want {
				t.Errorf("store after kills and a rerun differs from a clean ingest:\n%s", firstDiff(got, want))
			}
			if _, err := os.Stat(filepath.Join(dir, bulkMarker)); err == nil {
				t.Error("the rerun left the bulk marker")
			}
		})
	}
}
