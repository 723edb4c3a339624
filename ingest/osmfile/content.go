package osmfile

import (
	"bufio"
	"errors"
	"fmt"
	"os"
)

// Content is a file's decompressed content with its detected format, for
// readers outside this package (proposal files): Format is FormatUnknown
// when the content is none of the OSM formats (GeoJSON, for example). Close
// closes the file.
type Content struct {
	*bufio.Reader
	Format Format
	file   *os.File
}

// Close closes the underlying file.
func (c *Content) Close() error { return c.file.Close() }

// OpenContent opens the file at path, detects its compression (gzip, bzip2 or
// none) as OpenFile does and returns its decompressed content with the
// detected format. Content that is none of the OSM formats is not an error.
func OpenContent(path string) (*Content, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("ingest: open %s: %w", path, err)
	}
	src, _, err := decompress(path, f)
	if err != nil {
		f.Close()
		return nil, err
	}
	br := bufio.NewReaderSize(src, max(detectPeek, 1<<16))
	format, err := detectFormat(br)
	if err != nil && !errors.Is(err, ErrUnknown) {
		f.Close()
		return nil, &ParseError{File: path, Err: fmt.Errorf("%w: %w", ErrFormat, err)}
	}
	return &Content{Reader: br, Format: format, file: f}, nil
}
