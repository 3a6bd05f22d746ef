package daemon

import "encoding/json"

// measurementTNs finds the measurement time of a recorded payload the way
// the v1 contract checker (check-v1 replay-out) does when it judges the
// stamp of a replay's final tracks message: any payload that is a JSON
// object with an integer t_ns and a list dets counts, whatever its topic,
// its sensor, or the decoder's verdict on it. A repeated key counts by its
// last value, as a JSON object read into a dictionary does. A t_ns that is
// an integer beyond int64 cannot be a stamp and is not reported.
func measurementTNs(payload []byte) (int64, bool) {
	// A payload_b64 entry's bytes are arbitrary; the inline ones were
	// checked with their line, so this costs one more scan of valid input.
	if !json.Valid(payload) {
		return 0, false
	}
	i := skipWS(payload, 0)
	if i >= len(payload) || payload[i] != '{' {
		return 0, false
	}
	var tRaw, dRaw []byte
	i++
	for {
		i = skipWS(payload, i)
		if i >= len(payload) || payload[i] == '}' {
			break
		}
		kend := skipJSONString(payload, i)
		key := payload[i:kend]
		i = skipWS(payload, kend) + 1 // past ':'
		i = skipWS(payload, i)
		vend := skipJSONValue(payload, i)
		switch {
		case keyIs(key, "t_ns"):
			tRaw = payload[i:vend]
		case keyIs(key, "dets"):
			dRaw = payload[i:vend]
		}
		i = skipWS(payload, vend)
		if i < len(payload) && payload[i] == ',' {
			i++
		}
	}
	if len(dRaw) == 0 || dRaw[0] != '[' {
		return 0, false
	}
	return jsonInt64(tRaw)
}

// keyIs compares a raw member name (quotes included) with name; escapes
// ("t\u005fns") are decoded first, as any JSON reader does.
func keyIs(raw []byte, name string) bool {
	inner := raw[1 : len(raw)-1]
	for _, c := range inner {
		if c == '\\' {
			var s string
			return json.Unmarshal(raw, &s) == nil && s == name
		}
	}
	return string(inner) == name
}

// jsonInt64 reads a JSON number written as an integer (no fraction, no
// exponent: what a JSON reader returns as an integer, not a float).
func jsonInt64(raw []byte) (int64, bool) {
	if len(raw) == 0 {
		return 0, false
	}
	neg := raw[0] == '-'
	digits := raw
	if neg {
		digits = raw[1:]
	}
	if len(digits) == 0 {
		return 0, false
	}
	var v uint64
	for _, c := range digits {
		if c < '0' || c > '9' {
			return 0, false // fraction, exponent, or not a number at all
		}
		d := uint64(c - '0')
		if v > (1<<63-d)/10 { // keeps v ≤ 2⁶³, the magnitude of math.MinInt64
			return 0, false
		}
		v = v*10 + d
	}
	switch {
	case neg && v == 0:
		return 0, true
	case neg:
		return -int64(v-1) - 1, true // v = 2⁶³ gives math.MinInt64 without overflow
	case v > 1<<63-1:
		return 0, false
	}
	return int64(v), true
}

func skipWS(b []byte, i int) int {
	for i < len(b) && (b[i] == ' ' || b[i] == '\t' || b[i] == '\n' || b[i] == '\r') {
		i++
	}
	return i
}

// skipJSONString returns the index just past the string starting at b[i]
// (valid JSON assumed, as everywhere below).
func skipJSONString(b []byte, i int) int {
	for j := i + 1; j < len(b); j++ {
		switch b[j] {
		case '\\':
			j++
		case '"':
			return j + 1
		}
	}
	return len(b)
}

// skipJSONValue returns the index just past the value starting at b[i].
func skipJSONValue(b []byte, i int) int {
	if i >= len(b) {
		return i
	}
	switch b[i] {
	case '"':
		return skipJSONString(b, i)
	case '{', '[':
		depth := 0
		for j := i; j < len(b); j++ {
			switch b[j] {
			case '"':
				j = skipJSONString(b, j) - 1
			case '{', '[':
				depth++
			case '}', ']':
				depth--
				if depth == 0 {
					return j + 1
				}
			}
		}
		return len(b)
	}
	j := i
	for j < len(b) && b[j] != ',' && b[j] != '}' && b[j] != ']' && b[j] != ' ' && b[j] != '\t' && b[j] != '\n' && b[j] != '\r' {
		j++
	}
	return j
}
