//go:build validate

package ingest

// killRuns is how many times TestIngestKilled kills each write path under
// make validate.
const killRuns = 8
