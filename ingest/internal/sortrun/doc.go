// Package sortrun is the external sort behind ingest's bulk write path:
// records (an encoded key and value with where they were read) collect in a
// Buffer up to a byte budget, are sorted by key (equal keys in the order they
// were read) and spilled to temporary files, the sorted runs; a Merger then
// yields the records of every run in (key, read order), with bounded memory
// however large the input. The run format is private to one ingest: it is
// written and read back by the same process.
package sortrun
