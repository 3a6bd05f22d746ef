package eval

import (
	"bytes"
	"errors"
	"math"
	"reflect"
	"strings"
	"testing"

	"github.com/godwit-fusion/godwit/transport"
)

// Tracks written by transport's encoder read back equal (DESIGN.md tracks
// message), except state/state_cov, which scoring does not keep.
func TestReadTracksRoundTrip(t *testing.T) {
	m := transport.TracksMsg{V: 1, Vehicle: "yard-3", Seq: 9, TNs: ms(5), Frame: "site",
		Tracks: []transport.Track{{ID: 17, Status: "confirmed", Pos: [2]float64{12.1, -3.4}, Vel: [2]float64{1.2, 0.1},
			PosCov: [4]float64{0.04, 0.001, 0.001, 0.05}, Model: "cv", State: []float64{1, 2, 3, 4}, StateCov: make([]float64, 16),
			UpdatedNs: ms(4), Hits: 31, Misses: 1, Class: "cart"}},
		Ego: &transport.Ego{Pos: [2]float64{1, 2}, Yaw: 0.5, Vel: [2]float64{3, 0}, PosCov: [4]float64{1, 0, 0, 1}}}
	var buf []byte
	var err error
	for k := 0; k < 2; k++ {
		if buf, err = transport.AppendTracks(buf, &m); err != nil {
			t.Fatal(err)
		}
		buf = append(buf, '\n')
	}
	buf = append(buf, "\n  \n"...)
	got, err := ReadTracks(bytes.NewReader(buf))
	if err != nil || len(got) != 2 {
		t.Fatalf("%v, %d messages", err, len(got))
	}
	m.Tracks[0].State, m.Tracks[0].StateCov = nil, nil
	if !reflect.DeepEqual(got[1], m) {
		t.Errorf("got %+v\nwant %+v", got[1], m)
	}
}

// The encoder writes a non-finite position as null: it reads as NaN, and
// the Evaluator leaves that track out and counts it.
func TestReadTracksNull(t *testing.T) {
	line := `{"v":1,"vehicle":"x","seq":1,"t_ns":5,"frame":"site","tracks":[{"id":1,"status":"confirmed","pos":[null,1],"vel":[0,0],"pos_cov":[1,0,0,null],"model":"cv","state":[],"state_cov":[],"updated_ns":5,"hits":1,"misses":0}]}`
	got, err := ReadTracks(strings.NewReader(line))
	if err != nil || !math.IsNaN(got[0].Tracks[0].Pos[0]) || !math.IsNaN(got[0].Tracks[0].PosCov[3]) {
		t.Fatalf("%v %+v", err, got)
	}
	e := mustNew(t, []TruthLine{{TNs: 5}}, Options{})
	add(t, e, &got[0])
	if e.Summary().TracksIgnored != 1 {
		t.Error("track with a null position not counted as ignored")
	}
}

func TestReadTruth(t *testing.T) {
	in := `{"t_ns":1,"objects":[{"id":"p1","pos":[1,2],"vel":[0.5,0]}],"ego":{"pos":[0,0],"yaw":0.25}}
{"t_ns":2,"objects":[{"id":"p1","pos":[1.5,2]}]}
`
	got, err := ReadTruth(strings.NewReader(in))
	want := []TruthLine{
		{TNs: 1, Objects: []TruthObject{{ID: "p1", Pos: [2]float64{1, 2}, Vel: [2]float64{0.5, 0}}}, Ego: &TruthEgo{Yaw: 0.25}},
		{TNs: 2, Objects: []TruthObject{{ID: "p1", Pos: [2]float64{1.5, 2}}}},
	}
	if err != nil || !reflect.DeepEqual(got, want) {
		t.Errorf("got %+v %v", got, err)
	}
}

// Bad lines stop the read with the line number and what is wrong.
func TestReadErrors(t *testing.T) {
	good := `{"t_ns":1,"objects":[]}` + "\n"
	cases := []struct{ in, want string }{
		{good + `{"t_ns":1,"objects":[]}`, "truth line 2: t_ns 1 is not after"},
		{good + `{"t_ns":2}`, "truth line 2: objects missing"},
		{`{"t_ns":1.5,"objects":[]}`, "truth line 1: t_ns is not an integer"},
		{`{"t_ns":1,"objects":[{"id":"a","pos":[1]}]}`, "objects[0].pos must be an array of 2 numbers"},
		{`{"t_ns":1,"objects":[{"id":"a","pos":[1,null]}]}`, "objects[0].pos [1] is not a number"},
		{`{"t_ns":1,"objects":[{"id":"a","pos":[1,1e999]}]}`, "overflows"},
		{`{"t_ns":1,"objects":[{"id":"a","pos":[1,1]},{"id":"a","pos":[1,1]}]}`, `objects[1].id "a" repeats`},
		{`{"t_ns":1,"objects":[{"id":"","pos":[1,1]}]}`, "non-empty string"},
		{`{"t_ns":1,"objects":[],"ego":{"pos":[0,0]}}`, "ego.yaw missing"},
		{`[1,2]`, "want a JSON object"},
		{`{"t_ns":`, "not JSON"},
	}
	for _, c := range cases {
		_, err := ReadTruth(strings.NewReader(c.in))
		var le *LineError
		if !errors.As(err, &le) || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%s: %v, want a LineError with %q", c.in, err, c.want)
		}
	}
	tcases := []struct{ in, want string }{
		{`{"v":2,"t_ns":1,"frame":"site","tracks":[]}`, "v must be 1"},
		{`{"v":1,"t_ns":1,"frame":"body","tracks":[]}`, `frame "body"`},
		{`{"v":1,"t_ns":2,"frame":"site","tracks":[]}` + "\n" + `{"v":1,"t_ns":1.5,"frame":"site","tracks":[]}`, "tracks line 2: t_ns is not an integer"},
		{`{"v":1,"t_ns":1,"frame":"site","tracks":[{"id":-1}]}`, "tracks[0].id"},
		{`{"v":1,"t_ns":1,"frame":"site","tracks":[{"id":1,"status":"confirmed","pos":[0,0],"vel":[0,0],"pos_cov":[1,0,0]}]}`, "pos_cov must be an array of 4"},
	}
	for _, c := range tcases {
		_, err := ReadTracks(strings.NewReader(c.in))
		if err == nil || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%s: %v, want %q", c.in, err, c.want)
		}
	}
	long := `{"t_ns":1,"objects":[],"x":"` + strings.Repeat("a", maxLine) + `"}`
	if _, err := ReadTruth(strings.NewReader(long)); err == nil || !strings.Contains(err.Error(), "longer than") {
		t.Errorf("over-long line: %v", err)
	}
}
