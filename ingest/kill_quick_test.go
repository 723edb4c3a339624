//go:build !validate

package ingest

// killRuns is how many times TestIngestKilled kills each write path in make
// test; make validate (build tag validate) kills more often.
const killRuns = 2
