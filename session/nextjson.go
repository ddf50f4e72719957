package session

import (
	"math"
	"slices"
	"strconv"

	"waymark/stream"
)

// appendNextJSON appends r as encoding/json's Encoder writes it (the same
// bytes, newline included; TestNextJSONMatchesEncodingJSON checks this), or
// reports false when r holds a value encoding/json refuses (NaN or an
// infinity), so the caller can fall back to it and to its error. Reflection
// and the sorting of each item's feature map made encoding a tenth of
// serve's CPU under HTTP load.
func appendNextJSON(b []byte, r *NextResult) ([]byte, bool) {
	var keys []string
	b = append(b, `{"items":`...)
	if r.Items == nil {
		b = append(b, "null"...)
	} else {
		b = append(b, '[')
		for i := range r.Items {
			it := &r.Items[i]
			if i > 0 {
				b = append(b, ',')
			}
			b = append(b, `{"item":`...)
			b = stream.AppendJSONStringStd(b, it.Item)
			b = append(b, `,"score":`...)
			var ok bool
			if b, ok = appendJSONFloat(b, it.Score); !ok {
				return b, false
			}
			if len(it.Features) > 0 {
				b = append(b, `,"features":{`...)
				keys = keys[:0]
				for k := range it.Features {
					keys = append(keys, k)
				}
				slices.Sort(keys)
				for j, k := range keys {
					if j > 0 {
						b = append(b, ',')
					}
					b = stream.AppendJSONStringStd(b, k)
					b = append(b, ':')
					if b, ok = appendJSONFloat(b, it.Features[k]); !ok {
						return b, false
					}
				}
				b = append(b, '}')
			}
			if it.Explore {
				b = append(b, `,"explore":true`...)
			}
			if it.Fresh {
				b = append(b, `,"fresh":true`...)
			}
			b = append(b, '}')
		}
		b = append(b, ']')
	}
	b = append(b, `,"source":`...)
	b = stream.AppendJSONStringStd(b, r.Source)
	b = append(b, `,"tracked":`...)
	b = strconv.AppendBool(b, r.Tracked)
	b = append(b, `,"known":`...)
	b = strconv.AppendInt(b, int64(r.Known), 10)
	b = append(b, `,"unknown":`...)
	b = strconv.AppendInt(b, int64(r.Unknown), 10)
	b = append(b, `,"request":`...)
	b = stream.AppendJSONStringStd(b, r.Request)
	if len(r.Skipped) > 0 {
		b = append(b, `,"skipped":[`...)
		for i, s := range r.Skipped {
			if i > 0 {
				b = append(b, ',')
			}
			b = stream.AppendJSONStringStd(b, s)
		}
		b = append(b, ']')
	}
	return append(b, "}\n"...), true
}

// appendJSONFloat formats f as encoding/json does: the shortest decimal
// that reads back as f, in exponent form below 1e-6 and from 1e21 up.
func appendJSONFloat(b []byte, f float64) ([]byte, bool) {
	if math.IsNaN(f) || math.IsInf(f, 0) {
		return b, false
	}
	abs := math.Abs(f)
	format := byte('f')
	if abs != 0 && (abs < 1e-6 || abs >= 1e21) {
		format = 'e'
	}
	b = strconv.AppendFloat(b, f, format, -1, 64)
	if format == 'e' {
		// e-07 → e-7, as encoding/json writes it.
		if n := len(b); n >= 4 && b[n-4] == 'e' && b[n-3] == '-' && b[n-2] == '0' {
			b[n-2] = b[n-1]
			b = b[:n-1]
		}
	}
	return b, true
}
