package daemon

import (
	"math"
	"strconv"
	"testing"

	"github.com/valyala/fastjson"
)

// retime shifts t_ns and leaves alone what it cannot shift: a payload that
// is not an object, one without an integer t_ns, and one whose shifted
// t_ns would not fit in int64 (it used to wrap to the other sign).
func TestRetime(t *testing.T) {
	var p fastjson.Parser
	var a fastjson.Arena
	shifted := func(payload string, offset int64) (int64, bool) {
		b, ok := retime(&p, &a, nil, []byte(payload), offset)
		if !ok {
			return 0, false
		}
		v, err := fastjson.ParseBytes(b)
		if err != nil {
			t.Fatalf("retimed %q is not JSON: %v", b, err)
		}
		return v.GetInt64("t_ns"), true
	}
	if got, ok := shifted(`{"v":1,"t_ns":1000,"seq":3}`, 500); !ok || got != 1500 {
		t.Errorf("shift by 500: %d %v, want 1500", got, ok)
	}
	if got, ok := shifted(`{"t_ns":1000}`, -1500); !ok || got != -500 {
		t.Errorf("shift by -1500: %d %v, want -500", got, ok)
	}
	max := strconv.FormatInt(math.MaxInt64-10, 10)
	min := strconv.FormatInt(math.MinInt64+10, 10)
	for _, c := range []struct {
		payload string
		offset  int64
	}{
		{`[1,2]`, 1},
		{`{"seq":1}`, 1},
		{`{"t_ns":"12"}`, 1},
		{`{"t_ns":` + max + `}`, 11},
		{`{"t_ns":` + min + `}`, -11},
	} {
		if got, ok := shifted(c.payload, c.offset); ok {
			t.Errorf("%s shifted by %d: got t_ns %d, want it left alone", c.payload, c.offset, got)
		}
	}
	if got, ok := shifted(`{"t_ns":`+max+`}`, 10); !ok || got != math.MaxInt64 {
		t.Errorf("shift to exactly MaxInt64: %d %v", got, ok)
	}
}
