package transport

import (
	"errors"
	"math"
	"strconv"
	"strings"
	"testing"
	"time"
	"unsafe"

	"gonum.org/v1/gonum/mat"
	"pgregory.net/rapid"
)

// Arrival time used throughout: the DESIGN.md example time stamp plus 10 ms.
const (
	tExample  = int64(1764626400123456789) // DESIGN.md measurement example
	tArrival  = tExample + 10_000_000
	radarJSON = `{"v":1,"sensor":"front_radar","seq":1042,"t_ns":1764626400123456789,` +
		`"dets":[{"z":[23.4,0.12,-1.5]},` +
		`{"z":[41.0,-0.30,0.2],"r":[0.09,0,0, 0,0.0001,0, 0,0,0.04],"class":"cart","score":0.8},` +
		`{"z":[7.25,1.1,0.0],"class":"cart"}]}`
)

var testSensors = []SensorSpec{
	{Name: "front_radar", Dim: 3}, // range_bearing_rate (DESIGN.md)
	{Name: "front_camera", Dim: 2},
	{Name: "gnss", Dim: 2},
}

func newTestDecoder(t testing.TB) *Decoder {
	t.Helper()
	d, err := NewDecoder(testSensors, Limits{})
	if err != nil {
		t.Fatal(err)
	}
	return d
}

func TestDecodeDesignExample(t *testing.T) {
	d := newTestDecoder(t)
	var m Measurement
	if err := d.Decode([]byte(radarJSON), tArrival, &m); err != nil {
		t.Fatal(err)
	}
	// Values are those written in the DESIGN.md example message.
	if m.V != 1 || m.Sensor != "front_radar" || m.SensorIdx != 0 || m.Seq != 1042 || m.TNs != tExample {
		t.Fatalf("header = %+v", m)
	}
	if len(m.Dets) != 3 {
		t.Fatalf("%d dets, want 3", len(m.Dets))
	}
	d0, d1, d2 := m.Dets[0], m.Dets[1], m.Dets[2]
	if d0.Dim != 3 || d0.Z != [3]float64{23.4, 0.12, -1.5} || d0.HasR || d0.Class != "" || d0.HasScore {
		t.Errorf("dets[0] = %+v", d0)
	}
	wantR := [9]float64{0.09, 0, 0, 0, 0.0001, 0, 0, 0, 0.04}
	if d1.Z != [3]float64{41.0, -0.30, 0.2} || !d1.HasR || d1.R != wantR || d1.Class != "cart" || !d1.HasScore || d1.Score != 0.8 {
		t.Errorf("dets[1] = %+v", d1)
	}
	if d2.Class != "cart" || d2.HasR {
		t.Errorf("dets[2] = %+v", d2)
	}
	// Interning: the two "cart" strings share storage.
	if unsafeStringData(d1.Class) != unsafeStringData(d2.Class) {
		t.Error("class strings are not interned")
	}
}

func TestDecodeEmptyScanAndDuplicateKeys(t *testing.T) {
	d := newTestDecoder(t)
	var m Measurement
	// An empty dets list is a scan that saw nothing (DESIGN.md).
	if err := d.Decode([]byte(`{"v":1,"sensor":"gnss","seq":0,"t_ns":1764626400123456789,"dets":[]}`), tArrival, &m); err != nil {
		t.Fatal(err)
	}
	if len(m.Dets) != 0 || m.SensorIdx != 2 {
		t.Fatalf("got %+v", m)
	}
	// Repeated keys: the last one wins, as in encoding/json (Go documentation
	// of Unmarshal into a map).
	if err := d.Decode([]byte(`{"v":1,"sensor":"nope","sensor":"gnss","seq":5,"seq":6,"t_ns":1764626400123456789,"dets":[]}`), tArrival, &m); err != nil {
		t.Fatal(err)
	}
	if m.Seq != 6 {
		t.Errorf("seq = %d, want 6", m.Seq)
	}
	hdr := `{"v":1,"sensor":"front_camera","seq":7,"t_ns":1764626400123456789,"dets":[`
	if err := d.Decode([]byte(hdr+`{"z":[1],"r":[-1,0,0,1],"z":[3,4],"r":[2,0,0,2]}]}`), tArrival, &m); err != nil {
		t.Fatal(err)
	}
	if m.Dets[0].Z != [3]float64{3, 4} || m.Dets[0].R != [9]float64{2, 0, 0, 2} {
		t.Errorf("repeated z/r: %+v", m.Dets[0])
	}
	if r, _ := ReasonOf(d.Decode([]byte(hdr+`{"z":[3,4],"z":["a",4]}]}`), tArrival, &m)); r != ReasonBadVersion {
		t.Errorf("a bad last z must count: %v", r)
	}
}

func TestDecodeReasons(t *testing.T) {
	hdr := `"v":1,"sensor":"front_camera","seq":7,"t_ns":1764626400123456789`
	msg := func(dets string) string { return `{` + hdr + `,"dets":[` + dets + `]}` }
	cases := []struct {
		name, in string
		want     Reason
		field    string // part of the message naming the field
	}{
		{"truncated", `{"v":1,"sensor":"front_camera"`, ReasonBadJSON, "byte"},
		{"nan literal", msg(`{"z":[NaN,1]}`), ReasonBadJSON, "byte"},
		{"infinity literal", msg(`{"z":[Infinity,1]}`), ReasonBadJSON, "byte"},
		{"trailing comma", msg(`{"z":[1,2],}`), ReasonBadJSON, "byte"},
		{"leading zero", msg(`{"z":[01,2]}`), ReasonBadJSON, "byte"},
		{"control char in string", "{\"v\":1,\"sensor\":\"a\x01\\n\"}", ReasonBadJSON, "control"},
		{"bad escape", `{"v":1,"sensor":"\x"}`, ReasonBadJSON, "escape"},
		{"two values", `{} {}`, ReasonBadJSON, "after"},
		{"empty", ``, ReasonBadJSON, "end"},
		{"unknown sensor", `{"v":1,"sensor":"rear_radar","seq":7,"t_ns":1,"dets":[]}`, ReasonUnknownSensor, `"rear_radar"`},
		{"sensor missing", `{"v":1,"seq":7,"t_ns":1,"dets":[]}`, ReasonUnknownSensor, "sensor is missing"},
		{"sensor not a string", `{"v":1,"sensor":3,"seq":7,"t_ns":1,"dets":[]}`, ReasonUnknownSensor, "sensor"},
		{"z too short", msg(`{"z":[1,2]},{"z":[1]}`), ReasonBadDims, "dets[1].z has 1 values"},
		{"z too long", msg(`{"z":[1,2,3]}`), ReasonBadDims, "dets[0].z has 3"},
		{"z missing", msg(`{"r":[1,0,0,1]}`), ReasonBadDims, "dets[0].z is missing"},
		{"r wrong size", msg(`{"z":[1,2],"r":[1,0,1]}`), ReasonBadDims, "dets[0].r has 3"},
		{"overflow", msg(`{"z":[1,2]},{"z":[3,1e400]}`), ReasonNonFinite, "dets[1].z[1]"},
		{"negative overflow", msg(`{"z":[-1.8e308,2]}`), ReasonNonFinite, "dets[0].z[0]"},
		{"score overflow", msg(`{"z":[1,2],"score":1e999}`), ReasonNonFinite, "dets[0].score"},
		{"r overflow", msg(`{"z":[1,2],"r":[1e309,0,0,1]}`), ReasonNonFinite, "dets[0].r[0]"},
		{"r not symmetric", msg(`{"z":[1,2],"r":[1,0.5,0.4,1]}`), ReasonBadCov, "symmetric"},
		{"r indefinite", msg(`{"z":[1,2],"r":[1,2,2,1]}`), ReasonBadCov, "positive definite"},
		{"r singular", msg(`{"z":[1,2],"r":[1,1,1,1]}`), ReasonBadCov, "positive definite"},
		{"r zero", msg(`{"z":[1,2],"r":[0,0,0,0]}`), ReasonBadCov, "positive definite"},
		{"r negative variance", msg(`{"z":[1,2],"r":[-1,0,0,1]}`), ReasonBadCov, "positive definite"},
		{"t_ns too old", `{"v":1,"sensor":"gnss","seq":7,"t_ns":1764626300000000000,"dets":[]}`, ReasonTimeImplausible, "before arrival"},
		{"t_ns in the future", `{"v":1,"sensor":"gnss","seq":7,"t_ns":1764626500000000000,"dets":[]}`, ReasonTimeImplausible, "after arrival"},
		{"t_ns in ms", `{"v":1,"sensor":"gnss","seq":7,"t_ns":1764626400123,"dets":[]}`, ReasonTimeImplausible, "before arrival"},
		{"t_ns float", `{"v":1,"sensor":"gnss","seq":7,"t_ns":1.7646264e18,"dets":[]}`, ReasonTimeImplausible, "t_ns must be an integer"},
		{"t_ns beyond int64", `{"v":1,"sensor":"gnss","seq":7,"t_ns":9223372036854775808,"dets":[]}`, ReasonTimeImplausible, "int64"},
		{"t_ns minimum int64", `{"v":1,"sensor":"gnss","seq":7,"t_ns":-9223372036854775808,"dets":[]}`, ReasonTimeImplausible, "292 years"},
		{"payload too large", `{"v":1,"pad":"` + strings.Repeat("x", DefaultMaxPayloadBytes) + `"}`, ReasonTooLarge, "bytes, limit 65536"},
		{"too many dets", msg(strings.TrimSuffix(strings.Repeat(`{"z":[1,2]},`, DefaultMaxDets+1), ",")), ReasonTooLarge, "dets has 1025"},
		{"class too long", msg(`{"z":[1,2],"class":"` + strings.Repeat("c", 65) + `"}`), ReasonTooLarge, "dets[0].class is 65 bytes"},
		{"nested too deep", `{"v":1,"x":` + strings.Repeat("[", 70) + strings.Repeat("]", 70) + `}`, ReasonTooLarge, "nested"},
		{"version 2", `{"v":2,"sensor":"gnss","seq":7,"t_ns":1,"dets":[]}`, ReasonBadVersion, "v must be"},
		{"version missing", `{"sensor":"gnss","seq":7,"t_ns":1,"dets":[]}`, ReasonBadVersion, "v is missing"},
		{"version float", `{"v":1.0,"sensor":"gnss","seq":7,"t_ns":1,"dets":[]}`, ReasonBadVersion, "v must be"},
		{"not an object", `[1,2,3]`, ReasonBadVersion, "array"},
		{"seq negative", `{"v":1,"sensor":"gnss","seq":-1,"t_ns":1,"dets":[]}`, ReasonBadVersion, "seq"},
		{"seq missing", `{"v":1,"sensor":"gnss","t_ns":1,"dets":[]}`, ReasonBadVersion, "seq is missing"},
		{"dets missing", `{"v":1,"sensor":"gnss","seq":1,"t_ns":1764626400123456789}`, ReasonBadVersion, "dets is missing"},
		{"dets object", `{"v":1,"sensor":"gnss","seq":1,"t_ns":1764626400123456789,"dets":{}}`, ReasonBadVersion, "not a list"},
		{"z string element", msg(`{"z":[1,"2"]}`), ReasonBadVersion, "dets[0].z[1] is a string"},
		{"class number", msg(`{"z":[1,2],"class":5}`), ReasonBadVersion, "dets[0].class"},
	}
	d := newTestDecoder(t)
	var m Measurement
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			// Start from a decoded message so a rejection must clear it.
			if err := d.Decode([]byte(radarJSON), tArrival, &m); err != nil {
				t.Fatal(err)
			}
			err := d.Decode([]byte(c.in), tArrival, &m)
			r, ok := ReasonOf(err)
			if !ok {
				t.Fatalf("err = %v, want reason %v", err, c.want)
			}
			if r != c.want {
				t.Fatalf("reason %v (%v), want %v", r, err, c.want)
			}
			if !strings.Contains(err.Error(), c.field) {
				t.Errorf("message %q does not mention %q", err.Error(), c.field)
			}
			if len(m.Dets) != 0 || m.Sensor != "" {
				t.Errorf("rejected message left state behind: %+v", m)
			}
		})
	}
}

func TestDecodeTimeWindow(t *testing.T) {
	in := []byte(`{"v":1,"sensor":"gnss","seq":7,"t_ns":1764626400123456789,"dets":[]}`)
	var m Measurement
	d, _ := NewDecoder(testSensors, Limits{PastWindow: 50 * time.Millisecond, FutureWindow: -1})
	// 50 ms exactly is inside the window, 1 ns more is not.
	if err := d.Decode(in, tExample+50_000_000, &m); err != nil {
		t.Errorf("at the window edge: %v", err)
	}
	if r, _ := ReasonOf(d.Decode(in, tExample+50_000_001, &m)); r != ReasonTimeImplausible {
		t.Error("past the window edge was accepted")
	}
	// A negative FutureWindow disables that side.
	if err := d.Decode(in, tExample-int64(time.Hour), &m); err != nil {
		t.Errorf("future check should be off: %v", err)
	}
	// Arrival 0 means unknown: no window check.
	if err := d.Decode(in, 0, &m); err != nil {
		t.Errorf("unknown arrival: %v", err)
	}
}

func TestNewDecoderRejectsBadSpecs(t *testing.T) {
	for _, specs := range [][]SensorSpec{
		{{Name: "", Dim: 2}},
		{{Name: "a", Dim: 0}},
		{{Name: "a", Dim: 4}},
		{{Name: "a", Dim: 2}, {Name: "a", Dim: 3}},
	} {
		if _, err := NewDecoder(specs, Limits{}); err == nil {
			t.Errorf("%+v accepted", specs)
		}
	}
}

// TestCovarianceAgainstGonum checks the SPD test against gonum's Cholesky
// (mat.Cholesky.Factorize, the reference library) on symmetric matrices that
// are clearly definite or clearly indefinite.
func TestCovarianceAgainstGonum(t *testing.T) {
	mats := [][]float64{
		{4, 2, 0.6, 2, 2, 0.5, 0.6, 0.5, 3},           // SPD
		{1, 0.999, 0, 0.999, 1, 0, 0, 0, 1},           // SPD, correlation 0.999
		{1, 2, 0, 2, 1, 0, 0, 0, 1},                   // indefinite
		{2, -1, 0, -1, 2, -1, 0, -1, 2},               // SPD (second-difference matrix)
		{1, 0, 0, 0, -1e-3, 0, 0, 0, 1},               // negative variance
		{1e-8, 0, 0, 0, 1e4, 0, 0, 0, 1},              // SPD, badly scaled but fine
		{9, 3, 3, 3, 5, 1, 3, 1, 0.5},                 // indefinite (det < 0)
		{0.09, 0, 0, 0, 0.0001, 0, 0, 0, 0.04},        // DESIGN.md example r
		{1, 0.5, 0.5, 0.5, 1, 0.5, 0.5, 0.5, 1},       // SPD
		{1, -0.6, -0.6, -0.6, 1, -0.6, -0.6, -0.6, 1}, // indefinite: eigenvalue 1-2·0.6 < 0
	}
	for _, r := range mats {
		var chol mat.Cholesky
		want := chol.Factorize(mat.NewSymDense(3, append([]float64(nil), r...)))
		got := checkCovariance(r, 3) == ""
		if got != want {
			t.Errorf("%v: SPD %v, gonum says %v", r, got, want)
		}
	}
}

func TestDecodeNoAllocs(t *testing.T) {
	d := newTestDecoder(t)
	var m Measurement
	in := []byte(radarJSON)
	_ = d.Decode(in, tArrival, &m)
	if a := testing.AllocsPerRun(200, func() {
		if err := d.Decode(in, tArrival, &m); err != nil {
			t.Fatal(err)
		}
	}); a != 0 {
		t.Errorf("Decode allocates %.1f times per message", a)
	}
}

func TestReasonNames(t *testing.T) {
	// The fixed v1 set (DESIGN.md and issue 4 list these codes).
	want := []string{"bad_json", "unknown_sensor", "bad_dims", "non_finite", "bad_cov", "time_implausible", "too_large", "bad_version"}
	for i, w := range want {
		if Reason(i).String() != w {
			t.Errorf("Reason(%d) = %s, want %s", i, Reason(i), w)
		}
		if r, ok := ParseReason(w); !ok || r != Reason(i) {
			t.Errorf("ParseReason(%s) = %v %v", w, r, ok)
		}
	}
	var de *DecodeError
	if !errors.As(reject(ReasonBadCov, "x"), &de) || de.Reason != ReasonBadCov {
		t.Error("reject does not build a *DecodeError")
	}
}

func BenchmarkDecodeRadar3(b *testing.B) {
	d := newTestDecoder(b)
	var m Measurement
	in := []byte(radarJSON)
	b.SetBytes(int64(len(in)))
	b.ReportAllocs()
	for b.Loop() {
		if err := d.Decode(in, tArrival, &m); err != nil {
			b.Fatal(err)
		}
	}
}

func unsafeStringData(s string) *byte { return unsafe.StringData(s) }

// TestExactFloatAgainstStrconv: the fast path must agree bit for bit with
// strconv.ParseFloat (correctly rounded, IEEE 754) wherever it answers.
func TestExactFloatAgainstStrconv(t *testing.T) {
	cases := []string{"0", "-0", "1", "-1.5", "23.4", "0.12", "-0.30", "0.0001", "41.0", "1e22", "1e23",
		"123456789012345", "1234567890123456", "0.000000000000000000000001", "9.62964972193618e-35",
		"4.35", "1.7976931348623157e308", "5e-324", "0.1e1", "100e-2", "-0.0e5", "3.14159265358979", "1E+2"}
	for _, c := range cases {
		want, _ := strconv.ParseFloat(c, 64)
		if got, ok := exactFloat([]byte(c)); ok && math.Float64bits(got) != math.Float64bits(want) {
			t.Errorf("%s: fast path %v, strconv %v", c, got, want)
		}
	}
	rapid.Check(t, func(t *rapid.T) {
		mant := rapid.Int64Range(-1e15, 1e15).Draw(t, "mant")
		exp := rapid.IntRange(-30, 30).Draw(t, "exp")
		frac := rapid.IntRange(0, 8).Draw(t, "frac")
		s := strconv.FormatInt(mant, 10)
		if frac > 0 {
			m := strconv.FormatInt(abs(mant), 10)
			for len(m) <= frac {
				m = "0" + m
			}
			s = m[:len(m)-frac] + "." + m[len(m)-frac:]
			if mant < 0 {
				s = "-" + s
			}
		}
		s += "e" + strconv.Itoa(exp)
		want, _ := strconv.ParseFloat(s, 64)
		if got, ok := exactFloat([]byte(s)); ok && math.Float64bits(got) != math.Float64bits(want) {
			t.Fatalf("%s: fast path %v, strconv %v", s, got, want)
		}
	})
}

func abs(x int64) int64 {
	if x < 0 {
		return -x
	}
	return x
}
