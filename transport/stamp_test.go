package transport

import (
	"strconv"
	"strings"
	"testing"
)

// What a JSON object read into a map holds (RFC 8259 §4: names compare
// after unescaping; encoding/json (checked with Go 1.26) and Python's json
// (from memory) keep the last of repeated names), with t_ns an integer
// literal within int64 and dets a list.
func TestMeasurementTNsCases(t *testing.T) {
	cases := []struct {
		payload string
		want    int64
		ok      bool
	}{
		{`{"v":1,"sensor":"front_radar","seq":4,"t_ns":1900000000000000000,"dets":[{"z":[1,2,3]}]}`, 1900000000000000000, true},
		{`{"t_n\u0073":12,"dets":[]}`, 12, true},              // \u0073 is "s" (RFC 8259 §7)
		{`{"t_ns":12,"dets":[],"dets":"x"}`, 0, false},        // the last dets is no list
		{`{"t_ns":1.5,"dets":[]}`, 0, false},                  // a fraction is no integer
		{`{"t_ns":-9223372036854775809,"dets":[]}`, 0, false}, // below int64 (-2⁶³)
		{`{"t_ns":12,"dets":[` + strings.Repeat("[", 200) + strings.Repeat("]", 200) + `]}`, 12, true},
		{`{"t_ns":12,"dets":[1,]}`, 0, false},           // trailing comma: not JSON (RFC 8259 §5)
		{"{\"t_ns\":12,\"dets\":[\"\xff\"]}", 12, true}, // invalid UTF-8 in a string: json.Valid accepts it (checked with Go 1.26)
		{`  `, 0, false},
	}
	for _, c := range cases {
		got, ok := MeasurementTNs([]byte(c.payload))
		if got != c.want || ok != c.ok {
			t.Errorf("%q: got %d, %v; want %d, %v", c.payload, got, ok, c.want, c.ok)
		}
	}
}

// Safe from many goroutines at once (run with -race).
func TestMeasurementTNsConcurrent(t *testing.T) {
	done := make(chan bool)
	for g := range 4 {
		go func() {
			p := []byte(`{"t_ns":` + strconv.Itoa(g) + `,"dets":[]}`)
			ok := true
			for range 200 {
				v, good := MeasurementTNs(p)
				ok = ok && good && v == int64(g)
			}
			done <- ok
		}()
	}
	for range 4 {
		if !<-done {
			t.Error("a goroutine read a wrong stamp")
		}
	}
}
