package rules

import (
	"errors"
	"strconv"
	"strings"
)

// ErrInvalid is what every rule-file problem unwraps to: errors.Is(err, rules.ErrInvalid).
var ErrInvalid = errors.New("rules: invalid rule file")

// Problem is one thing wrong in a rule file, at a 1-based line and column;
// columns count characters, not bytes. Line and Column are 0 only for a YAML
// failure that the yaml package reports without a position.
type Problem struct {
	File   string
	Line   int
	Column int
	Msg    string
}

// Error formats the problem as "file:line:col: msg", or "file:line: msg" when
// the column is unknown.
func (p Problem) Error() string {
	var b strings.Builder
	b.WriteString(p.File)
	if p.Line > 0 {
		b.WriteByte(':')
		b.WriteString(strconv.Itoa(p.Line))
		if p.Column > 0 {
			b.WriteByte(':')
			b.WriteString(strconv.Itoa(p.Column))
		}
	}
	b.WriteString(": ")
	b.WriteString(p.Msg)
	return b.String()
}

// Unwrap returns ErrInvalid.
func (p Problem) Unwrap() error { return ErrInvalid }

// Problems lists every problem found in a rule file, in file order. It is the
// error Parse and Load return for a file that does not validate.
type Problems []Problem

// Error lists the problems, one a line.
func (ps Problems) Error() string {
	lines := make([]string, len(ps))
	for i, p := range ps {
		lines[i] = p.Error()
	}
	return strings.Join(lines, "\n")
}

// Unwrap returns ErrInvalid.
func (ps Problems) Unwrap() error { return ErrInvalid }
