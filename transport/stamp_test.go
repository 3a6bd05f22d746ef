package transport

import (
	"bytes"
	"encoding/json"
	"strconv"
	"strings"
	"testing"
)

// MeasurementTNs agrees with encoding/json (the standard library's reader,
// as reference) reading the payload into a map: t_ns an integer literal
// within int64, dets a list, the last of repeated keys.
func TestMeasurementTNsAgreesWithEncodingJSON(t *testing.T) {
	payloads := []string{
		`{"v":1,"sensor":"front_radar","seq":4,"t_ns":1900000000000000000,"dets":[{"z":[1,2,3]}]}`,
		`{"t_n\u0073":12,"dets":[]}`,
		`{"t_ns":12,"dets":[],"dets":"x"}`,
		`{"t_ns":1.5,"dets":[]}`,
		`{"t_ns":-9223372036854775809,"dets":[]}`,
		`{"t_ns":12,"dets":[` + strings.Repeat("[", 200) + strings.Repeat("]", 200) + `]}`,
		`{"t_ns":12,"dets":[1,]}`,
		"{\"t_ns\":12,\"dets\":[\"\xff\"]}",
		`  `,
	}
	for _, p := range payloads {
		got, ok := MeasurementTNs([]byte(p))
		want, wok := jsonTNs([]byte(p))
		if got != want || ok != wok {
			t.Errorf("%q: got %d, %v; encoding/json reads %d, %v", p, got, ok, want, wok)
		}
	}
}

func jsonTNs(b []byte) (int64, bool) {
	var m map[string]json.RawMessage
	if !json.Valid(b) || json.Unmarshal(b, &m) != nil || m == nil {
		return 0, false
	}
	if d := bytes.TrimSpace(m["dets"]); len(d) == 0 || d[0] != '[' {
		return 0, false
	}
	raw := string(m["t_ns"])
	if strings.ContainsAny(raw, ".eE") {
		return 0, false
	}
	v, err := strconv.ParseInt(raw, 10, 64)
	if err != nil {
		return 0, false
	}
	return v, true
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
