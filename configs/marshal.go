package configs

import (
	"bytes"
	"reflect"

	"gopkg.in/yaml.v3"
)

// Marshal prints a configuration as YAML with every key spelled out, as
// `godwit check` shows the resolved configuration. Keys that do not apply
// (fx on a radar, fov_deg on an odometer, yaw_accel_sd without ctrv) are
// left out, so the output parses back to the same Config.
func Marshal(c *Config) ([]byte, error) {
	n, err := encodeStruct(reflect.ValueOf(*c), c, nil)
	if err != nil {
		return nil, err
	}
	var buf bytes.Buffer
	enc := yaml.NewEncoder(&buf)
	enc.SetIndent(2)
	if err := enc.Encode(n); err != nil {
		return nil, err
	}
	if err := enc.Close(); err != nil {
		return nil, err
	}
	return buf.Bytes(), nil
}

// flowKeys are printed on one line: short lists and small records read
// better as [a, b] and {x: 0, y: 0}.
var flowKeys = map[string]bool{"site": true, "pose": true, "mount": true, "noise_sd": true, "confirm": true, "tls": true}

// applies reports whether a key is meaningful for the sensor s (nil outside
// sensors) under configuration c; the validator rejects these keys where
// they do not apply.
func applies(c *Config, s *Sensor, key string) bool {
	if s != nil {
		switch key {
		case "fx", "cx", "range_sd_frac":
			return s.Kind == KindPinhole
		case "max_range", "fov_deg", "p_detect", "clutter_per_scan":
			return !IsEgoKind(s.Kind)
		}
		return true
	}
	if key == "yaw_accel_sd" {
		return c.Tracker.Motion == "ctrv"
	}
	return true
}

func encodeStruct(v reflect.Value, c *Config, s *Sensor) (*yaml.Node, error) {
	m := &yaml.Node{Kind: yaml.MappingNode, Tag: "!!map"}
	t := v.Type()
	for i := 0; i < t.NumField(); i++ {
		key := yamlKey(t.Field(i))
		if key == "" || !applies(c, s, key) {
			continue
		}
		val, err := encodeValue(v.Field(i), c)
		if err != nil {
			return nil, err
		}
		if flowKeys[key] {
			val.Style = yaml.FlowStyle
		}
		m.Content = append(m.Content, &yaml.Node{Kind: yaml.ScalarNode, Tag: "!!str", Value: key}, val)
	}
	return m, nil
}

func encodeValue(v reflect.Value, c *Config) (*yaml.Node, error) {
	switch v.Kind() {
	case reflect.Struct:
		var s *Sensor
		if sv, ok := v.Interface().(Sensor); ok {
			s = &sv
		}
		return encodeStruct(v, c, s)
	case reflect.Slice:
		seq := &yaml.Node{Kind: yaml.SequenceNode, Tag: "!!seq"}
		for i := 0; i < v.Len(); i++ {
			e, err := encodeValue(v.Index(i), c)
			if err != nil {
				return nil, err
			}
			seq.Content = append(seq.Content, e)
		}
		return seq, nil
	}
	n := &yaml.Node{}
	if err := n.Encode(v.Interface()); err != nil {
		return nil, err
	}
	return n, nil
}
