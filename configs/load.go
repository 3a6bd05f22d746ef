package configs

import (
	"bytes"
	"errors"
	"fmt"
	"io"
	"os"
	"reflect"
	"regexp"
	"strconv"
	"strings"

	"gopkg.in/yaml.v3"
)

// Sensor kinds (DESIGN.md, measurement models).
const (
	KindPositionXY       = "position_xy"
	KindRangeBearing     = "range_bearing"
	KindRangeBearingRate = "range_bearing_rate"
	KindPinhole          = "pinhole"
	KindGNSS             = "gnss"
	KindOdometry         = "odometry"
)

// Values of platform.motion and timing.clock.
const (
	MotionFixed    = "fixed"
	MotionMoving   = "moving"
	ClockSynced    = "synced"
	ClockEstimate  = "estimate"
	maxConfigBytes = 1 << 20
)

// Kinds lists the sensor kinds in the order DESIGN.md gives them.
var Kinds = []string{KindPositionXY, KindRangeBearing, KindRangeBearingRate, KindPinhole, KindGNSS, KindOdometry}

// MeasDim is the dimension of z for a sensor kind, 0 for an unknown kind.
func MeasDim(kind string) int {
	switch kind {
	case KindPositionXY, KindRangeBearing, KindPinhole, KindGNSS, KindOdometry:
		return 2
	case KindRangeBearingRate:
		return 3
	}
	return 0
}

// IsEgoKind reports whether a kind measures the platform itself (gnss,
// odometry) rather than targets.
func IsEgoKind(kind string) bool {
	return kind == KindGNSS || kind == KindOdometry
}

// Load reads and parses a configuration file. Errors name the path as given.
func Load(path string) (*Config, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, &ErrorList{Errors: []*Error{{File: path, Msg: "cannot read: " + unwrapPathError(err)}}}
	}
	defer f.Close()
	data, err := io.ReadAll(io.LimitReader(f, maxConfigBytes+1))
	if err != nil {
		return nil, &ErrorList{Errors: []*Error{{File: path, Msg: "cannot read: " + unwrapPathError(err)}}}
	}
	return Parse(path, data)
}

func unwrapPathError(err error) string {
	var pe *os.PathError
	if errors.As(err, &pe) {
		return pe.Err.Error()
	}
	return err.Error()
}

// Parse decodes a configuration strictly, applies Defaults and validates
// it. name labels the messages (a file name). On any problem it returns nil
// and an *ErrorList holding every problem found.
func Parse(name string, data []byte) (*Config, error) {
	if len(data) > maxConfigBytes {
		return nil, &ErrorList{Errors: []*Error{{File: name, Msg: fmt.Sprintf("larger than %d bytes; a configuration is a short text file", maxConfigBytes)}}}
	}
	root, perr := parseYAML(name, data)
	if perr != nil {
		return nil, &ErrorList{Errors: []*Error{perr}}
	}
	d := newDecoder(name)
	var c Config
	d.lines[""] = root.Line
	d.decode(root, reflect.ValueOf(&c).Elem(), "")
	if len(d.Errs) == 0 && !d.set[""] {
		d.errorf(root.Line, "", "empty configuration; it needs at least vehicle and sensors")
	}
	if len(d.Errs) > 0 {
		// Type and key errors first: validating half-decoded values would
		// add follow-on messages that are not the user's mistakes.
		d.Sort()
		return nil, &ErrorList{Errors: d.Errs}
	}
	applyDefaults(&c, func(p string) bool { return d.set[p] })
	v := validator{c: &c, d: d}
	v.run()
	if len(d.Errs) > 0 {
		d.Sort()
		return nil, &ErrorList{Errors: d.Errs}
	}
	return &c, nil
}

var yamlLine = regexp.MustCompile(`^yaml: line (\d+): (.*)$`)

// parseYAML reads exactly one YAML document. It turns the parser's
// messages into located Errors and guards against a parser panic, so bad
// input can never take the caller down.
func parseYAML(name string, data []byte) (root *yaml.Node, perr *Error) {
	defer func() {
		if r := recover(); r != nil {
			root, perr = nil, &Error{File: name, Msg: fmt.Sprintf("not valid YAML (parser failed: %v)", r)}
		}
	}()
	dec := yaml.NewDecoder(bytes.NewReader(data))
	var doc yaml.Node
	if err := dec.Decode(&doc); err != nil {
		if err == io.EOF {
			return nil, &Error{File: name, Msg: "empty configuration; it needs at least vehicle and sensors"}
		}
		return nil, yamlError(name, err)
	}
	var extra yaml.Node
	if err := dec.Decode(&extra); err != io.EOF {
		if err != nil {
			return nil, yamlError(name, err)
		}
		return nil, &Error{File: name, Line: extra.Line, Msg: "a second YAML document (---) starts here; put one configuration per file"}
	}
	if doc.Kind != yaml.DocumentNode || len(doc.Content) != 1 {
		return nil, &Error{File: name, Msg: "empty configuration; it needs at least vehicle and sensors"}
	}
	return doc.Content[0], nil
}

func yamlError(name string, err error) *Error {
	msg := err.Error()
	first, _, _ := strings.Cut(msg, "\n")
	if m := yamlLine.FindStringSubmatch(first); m != nil {
		line, _ := strconv.Atoi(m[1])
		return &Error{File: name, Line: line, Msg: "not valid YAML: " + m[2]}
	}
	return &Error{File: name, Msg: "not valid YAML: " + strings.TrimPrefix(first, "yaml: ")}
}
