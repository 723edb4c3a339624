// Package cli is the plumbing the loadwake commands share: output files for
// --json, --md and --csv ("-" meaning stdout), the progress display, usage
// errors and the exit code and hint of each error, the provenance a report
// carries, and the flags of the study commands with the study request they
// open. Each command file in cmd/loadwake declares its options and calls into
// this package and one project package; nothing here decides a result.
package cli
