package configs

import (
	"reflect"
	"slices"
	"strings"
	"testing"
)

func TestExamplesLoad(t *testing.T) {
	if got := Examples(); !slices.Equal(got, []string{"campus-shuttle", "dock-post"}) {
		t.Fatalf("Examples() = %v", got)
	}
	for _, name := range Examples() {
		t.Run(name, func(t *testing.T) {
			c, err := Example(name)
			if err != nil {
				t.Fatalf("shipped example does not load:\n%v", err)
			}
			// The same file on disk (what `godwit run --config configs/...`
			// reads) gives the same configuration.
			d, err := Load(name + ".yaml")
			if err != nil {
				t.Fatal(err)
			}
			if !reflect.DeepEqual(c, d) {
				t.Error("embedded and on-disk example differ")
			}
		})
	}
}

// TestExamplesContent: the examples show what the issue asks of them.
func TestExamplesContent(t *testing.T) {
	kinds := func(c *Config) []string {
		var k []string
		for _, s := range c.Sensors {
			k = append(k, s.Kind)
		}
		slices.Sort(k)
		return k
	}
	shuttle, err := Example("campus-shuttle.yaml")
	if err != nil {
		t.Fatal(err)
	}
	if shuttle.Platform.Motion != "moving" ||
		!slices.Equal(kinds(shuttle), []string{"gnss", "odometry", "pinhole", "position_xy", "range_bearing_rate"}) {
		t.Errorf("campus-shuttle: motion %s, kinds %v", shuttle.Platform.Motion, kinds(shuttle))
	}
	post, err := Example("dock-post")
	if err != nil {
		t.Fatal(err)
	}
	if post.Platform.Motion != "fixed" || !slices.Equal(kinds(post), []string{"position_xy", "range_bearing_rate"}) {
		t.Errorf("dock-post: motion %s, kinds %v", post.Platform.Motion, kinds(post))
	}
	if _, err := ExampleYAML("harbour"); err == nil || !strings.Contains(err.Error(), "campus-shuttle, dock-post") {
		t.Errorf("unknown example: %v", err)
	}
}

// TestMarshalRoundTrip: the resolved YAML that `godwit check` prints parses
// back to the very same configuration.
func TestMarshalRoundTrip(t *testing.T) {
	for _, name := range Examples() {
		c, err := Example(name)
		if err != nil {
			t.Fatal(err)
		}
		out, err := Marshal(c)
		if err != nil {
			t.Fatal(err)
		}
		back, err := Parse("resolved.yaml", out)
		if err != nil {
			t.Fatalf("%s: resolved YAML does not parse:\n%v\n%s", name, err, out)
		}
		if !reflect.DeepEqual(c, back) {
			t.Errorf("%s: round trip differs:\n%s", name, out)
		}
	}
}

// TestMarshalLeavesOutInapplicable: the printout has no pinhole keys on a
// radar and no tracking keys on an odometer.
func TestMarshalLeavesOutInapplicable(t *testing.T) {
	c, err := Example("campus-shuttle")
	if err != nil {
		t.Fatal(err)
	}
	out, err := Marshal(c)
	if err != nil {
		t.Fatal(err)
	}
	text := string(out)
	odo := text[strings.Index(text, "name: wheel_odometry"):strings.Index(text, "name: front_radar")]
	if strings.Contains(odo, "fov_deg") || strings.Contains(odo, "fx:") {
		t.Errorf("odometry printed with tracking or pinhole keys:\n%s", odo)
	}
	if strings.Count(text, "fx:") != 1 {
		t.Errorf("fx printed %d times, want once (the camera)", strings.Count(text, "fx:"))
	}
}
