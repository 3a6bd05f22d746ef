package main

import "io"

// progress is a no-op until the terminal bar is wired in.
type progress struct{}

func newProgress(w io.Writer, what string) *progress { return &progress{} }
func (p *progress) set(done, total int)            {}
func (p *progress) done()                          {}
