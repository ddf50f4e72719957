package stream

import (
	"encoding/json"
	"errors"
	"math"
	"slices"
	"strconv"
)

// Limits of a catalogue record. They keep one bad producer from filling memory
// through the content model; a real category path, tag list or title fits
// comfortably.
const (
	MaxAttrs          = 256   // keys per record
	MaxAttrKeyBytes   = 128   // bytes per key
	MaxAttrValues     = 1024  // values per key
	MaxAttrValueBytes = 16384 // bytes per value (a long description)
	MaxVectorLen      = 4096  // dimensions of "vector"
)

// ItemRecord is one catalogue record: what an item is, for the content model
// and the availability filter. It arrives on the catalogue subject or over
// HTTP; a later record for the same item replaces the earlier one.
type ItemRecord struct {
	Item string // required, 1..MaxItemBytes bytes
	// Attrs holds string attributes: category path, tags, title, brand-free
	// descriptions... A JSON value may be a string or an array of strings;
	// both decode to a slice. Attributes with no values are dropped.
	Attrs     map[string][]string
	Vector    []float32 // optional dense vector computed elsewhere
	Available *bool     // optional; nil means "not said"
	Published int64     // optional publication time, unix ms; 0 if absent
	Seq       uint64    // stream sequence when it came from the bus, else 0
}

type wireItem struct {
	Item      string                     `json:"item"`
	Attrs     map[string]json.RawMessage `json:"attrs"`
	Vector    []float32                  `json:"vector"`
	Available *bool                      `json:"available"`
	Published json.RawMessage            `json:"published"`
}

// DecodeItemJSON decodes and validates one catalogue record. Errors are
// *FieldError values wrapping ErrInvalidItem. Catalogue records are rare next
// to clicks, so this goes through encoding/json.
func DecodeItemJSON(data []byte) (ItemRecord, error) {
	var w wireItem
	if err := json.Unmarshal(data, &w); err != nil {
		return ItemRecord{}, jsonError(err, ErrInvalidItem)
	}
	r := ItemRecord{Item: w.Item, Vector: w.Vector, Available: w.Available}
	if len(r.Vector) == 0 {
		r.Vector = nil // "vector":[] says nothing; keep one representation of "none"
	}
	if len(w.Attrs) > MaxAttrs {
		return ItemRecord{}, itemErr("attrs", strconv.Itoa(len(w.Attrs))+" keys, more than the limit of "+strconv.Itoa(MaxAttrs))
	}
	for k, raw := range w.Attrs {
		vals, err := decodeAttr(k, raw)
		if err != nil {
			return ItemRecord{}, err
		}
		if len(vals) == 0 {
			continue
		}
		if r.Attrs == nil {
			r.Attrs = make(map[string][]string, len(w.Attrs))
		}
		r.Attrs[k] = vals
	}
	pub, err := decodeRawTS(w.Published, "published", ErrInvalidItem)
	if err != nil {
		return ItemRecord{}, err
	}
	r.Published = pub
	if err := r.Validate(); err != nil {
		return ItemRecord{}, err
	}
	return r, nil
}

func decodeAttr(key string, raw json.RawMessage) ([]string, error) {
	field := "attrs." + truncate(key, 64)
	if len(raw) == 0 || string(raw) == "null" {
		return nil, nil
	}
	switch raw[0] {
	case '"':
		var s string
		if err := json.Unmarshal(raw, &s); err != nil {
			return nil, itemErr(field, err.Error())
		}
		return []string{s}, nil
	case '[':
		var vals []string
		if err := json.Unmarshal(raw, &vals); err != nil {
			return nil, itemErr(field, "must be a string or an array of strings")
		}
		return vals, nil
	}
	return nil, itemErr(field, "must be a string or an array of strings, got "+jsonKind(raw[0]))
}

// Validate reports the first problem with r as a *FieldError wrapping
// ErrInvalidItem.
func (r *ItemRecord) Validate() error {
	if err := validateID("item", r.Item, MaxItemBytes, true, true, ErrInvalidItem); err != nil {
		return err
	}
	if len(r.Attrs) > MaxAttrs {
		return itemErr("attrs", strconv.Itoa(len(r.Attrs))+" keys, more than the limit of "+strconv.Itoa(MaxAttrs))
	}
	for k, vals := range r.Attrs {
		field := "attrs." + truncate(k, 64)
		if err := validateID("attrs", k, MaxAttrKeyBytes, true, true, ErrInvalidItem); err != nil {
			reason := err.Error()
			var fe *FieldError
			if errors.As(err, &fe) {
				reason = fe.Reason
			}
			return itemErr(field, "key "+reason)
		}
		if len(vals) > MaxAttrValues {
			return itemErr(field, strconv.Itoa(len(vals))+" values, more than the limit of "+strconv.Itoa(MaxAttrValues))
		}
		for _, v := range vals {
			if len(v) > MaxAttrValueBytes {
				return itemErr(field, "a value of "+strconv.Itoa(len(v))+" bytes, more than the limit of "+strconv.Itoa(MaxAttrValueBytes))
			}
		}
	}
	if len(r.Vector) > MaxVectorLen {
		return itemErr("vector", strconv.Itoa(len(r.Vector))+" dimensions, more than the limit of "+strconv.Itoa(MaxVectorLen))
	}
	for i, v := range r.Vector {
		if math.IsNaN(float64(v)) || math.IsInf(float64(v), 0) {
			return itemErr("vector", "element "+strconv.Itoa(i)+" is not a finite number")
		}
	}
	switch {
	case r.Published < 0:
		return itemErr("published", "must be after 1970-01-01T00:00:00Z")
	case r.Published > MaxTS:
		return itemErr("published", "must not be after year 9999")
	}
	return nil
}

// AppendJSON appends the canonical JSON form of r: keys of attrs sorted, a
// single value written as a string and several as an array, optional fields
// omitted when absent. Seq is not written.
func (r ItemRecord) AppendJSON(dst []byte) []byte {
	dst = append(dst, `{"item":`...)
	dst = appendJSONString(dst, r.Item)
	if len(r.Attrs) > 0 {
		keys := make([]string, 0, len(r.Attrs))
		for k, v := range r.Attrs {
			if len(v) > 0 {
				keys = append(keys, k)
			}
		}
		slices.Sort(keys)
		dst = append(dst, `,"attrs":{`...)
		for i, k := range keys {
			if i > 0 {
				dst = append(dst, ',')
			}
			dst = appendJSONString(dst, k)
			dst = append(dst, ':')
			vals := r.Attrs[k]
			if len(vals) == 1 {
				dst = appendJSONString(dst, vals[0])
				continue
			}
			dst = append(dst, '[')
			for j, v := range vals {
				if j > 0 {
					dst = append(dst, ',')
				}
				dst = appendJSONString(dst, v)
			}
			dst = append(dst, ']')
		}
		dst = append(dst, '}')
	}
	if len(r.Vector) > 0 {
		dst = append(dst, `,"vector":[`...)
		for i, v := range r.Vector {
			if i > 0 {
				dst = append(dst, ',')
			}
			// Shortest text that reads back as the same float32. JSON has no
			// NaN or Inf; Validate refuses them, and 0 stands in here so the
			// output stays valid JSON even for an unvalidated record.
			f := float64(v)
			if math.IsNaN(f) || math.IsInf(f, 0) {
				f = 0
			}
			dst = strconv.AppendFloat(dst, f, 'g', -1, 32)
		}
		dst = append(dst, ']')
	}
	if r.Available != nil {
		dst = append(dst, `,"available":`...)
		dst = strconv.AppendBool(dst, *r.Available)
	}
	if r.Published != 0 {
		dst = append(dst, `,"published":`...)
		dst = strconv.AppendInt(dst, r.Published, 10)
	}
	return append(dst, '}')
}

// DecodeItemMsg decodes a catalogue record from a bus message and sets Seq.
func DecodeItemMsg(m Msg) (ItemRecord, error) {
	r, err := DecodeItemJSON(m.Data)
	if err != nil {
		return ItemRecord{}, err
	}
	r.Seq = m.Seq
	return r, nil
}
