package configs

import (
	"fmt"
	"strings"
)

// Error is one problem found in a configuration file, located by file and
// line and named by the field path (e.g. sensors[1].noise_sd).
type Error struct {
	File string // base name as given to Parse, or the path given to Load
	Line int    // 1-based; 0 when the problem has no place in the file
	// Column is 1-based where known (0 otherwise). Error() leaves it out:
	// file:line is what a person reads; tools may use the column.
	Column int
	Path   string // field path; empty for whole-document problems
	Msg    string // what is wrong and what was expected
}

// Error formats as "configs: FILE:LINE: PATH MSG".
func (e *Error) Error() string {
	var b strings.Builder
	b.WriteString("configs: ")
	b.WriteString(e.File)
	if e.Line > 0 {
		fmt.Fprintf(&b, ":%d", e.Line)
	}
	b.WriteString(": ")
	if e.Path != "" {
		b.WriteString(e.Path)
		b.WriteByte(' ')
	}
	b.WriteString(e.Msg)
	return b.String()
}

// ErrorList holds every problem of one configuration, in file order where
// they have a line. Parse and Load return it so a person can fix them all in
// one pass instead of one per run.
type ErrorList struct {
	Errors []*Error
}

// Error joins the problems one per line.
func (l *ErrorList) Error() string {
	lines := make([]string, len(l.Errors))
	for i, e := range l.Errors {
		lines[i] = e.Error()
	}
	return strings.Join(lines, "\n")
}

// Unwrap exposes the single problems to errors.Is / errors.As.
func (l *ErrorList) Unwrap() []error {
	out := make([]error, len(l.Errors))
	for i, e := range l.Errors {
		out[i] = e
	}
	return out
}
