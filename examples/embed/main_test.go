package main

import (
	"regexp"
	"strings"
	"testing"
)

// The example must keep working: both invented tractors end up as
// confirmed tracks with the class label their detections carry.
func TestEmbedExample(t *testing.T) {
	var b strings.Builder
	if err := run(&b, 20); err != nil {
		t.Fatal(err)
	}
	out := b.String()
	n := len(regexp.MustCompile(`(?m)^  track \d+ confirmed +yard_tractor`).FindAllString(out, -1))
	if n != 2 {
		t.Fatalf("want 2 confirmed yard_tractor tracks, got %d:\n%s", n, out)
	}
}
