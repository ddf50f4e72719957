package models

import (
	"fmt"
	"sort"
	"strconv"
	"strings"
)

// Spec is a parsed model spec: a name and its parameters, written
// name(key=value,key=value). A bare name takes every default.
type Spec struct {
	Name   string
	Params map[string]string
}

// ParseSpec parses one model spec such as "sr(window=5)".
func ParseSpec(s string) (Spec, error) {
	s = strings.TrimSpace(s)
	sp := Spec{Params: map[string]string{}}
	open := strings.IndexByte(s, '(')
	if open < 0 {
		sp.Name = s
	} else {
		if !strings.HasSuffix(s, ")") {
			return sp, fmt.Errorf("%w: %q: missing ')'", ErrBadSpec, s)
		}
		sp.Name = strings.TrimSpace(s[:open])
		body := strings.TrimSpace(s[open+1 : len(s)-1])
		if body != "" {
			for _, kv := range strings.Split(body, ",") {
				k, v, ok := strings.Cut(kv, "=")
				k, v = strings.TrimSpace(k), strings.TrimSpace(v)
				if !ok || k == "" || v == "" {
					return sp, fmt.Errorf("%w: %q: parameter %q is not key=value", ErrBadSpec, s, kv)
				}
				if _, dup := sp.Params[k]; dup {
					return sp, fmt.Errorf("%w: %q: parameter %q given twice", ErrBadSpec, s, k)
				}
				sp.Params[k] = v
			}
		}
	}
	if sp.Name == "" || strings.ContainsAny(sp.Name, " ()=,") {
		return sp, fmt.Errorf("%w: %q: bad model name", ErrBadSpec, s)
	}
	return sp, nil
}

// SplitSpecs splits a comma-separated list of specs, keeping commas inside
// parentheses: "sr(window=5),markov" gives two specs.
func SplitSpecs(list string) ([]string, error) {
	var out []string
	depth, start := 0, 0
	for i, c := range list {
		switch c {
		case '(':
			depth++
		case ')':
			depth--
			if depth < 0 {
				return nil, fmt.Errorf("%w: %q: unbalanced ')'", ErrBadSpec, list)
			}
		case ',':
			if depth == 0 {
				out = append(out, strings.TrimSpace(list[start:i]))
				start = i + 1
			}
		}
	}
	if depth != 0 {
		return nil, fmt.Errorf("%w: %q: unbalanced '('", ErrBadSpec, list)
	}
	if last := strings.TrimSpace(list[start:]); last != "" {
		out = append(out, last)
	}
	for _, s := range out {
		if s == "" {
			return nil, fmt.Errorf("%w: %q: empty spec", ErrBadSpec, list)
		}
	}
	return out, nil
}

// String writes the spec back with sorted parameters.
func (s Spec) String() string {
	if len(s.Params) == 0 {
		return s.Name
	}
	keys := make([]string, 0, len(s.Params))
	for k := range s.Params {
		keys = append(keys, k)
	}
	sort.Strings(keys)
	parts := make([]string, len(keys))
	for i, k := range keys {
		parts[i] = k + "=" + s.Params[k]
	}
	return s.Name + "(" + strings.Join(parts, ",") + ")"
}

// params reads typed parameters and reports unknown or bad ones.
type params struct {
	spec Spec
	used map[string]bool
	err  error
}

func newParams(s Spec) *params { return &params{spec: s, used: map[string]bool{}} }

func (p *params) Int(key string, def, min int) int {
	v, ok := p.spec.Params[key]
	p.used[key] = true
	if !ok {
		return def
	}
	n, err := strconv.Atoi(v)
	if err != nil || n < min {
		p.fail(fmt.Errorf("%w: %s: %s=%q must be an integer >= %d", ErrBadSpec, p.spec.Name, key, v, min))
		return def
	}
	return n
}

func (p *params) Float(key string, def, min float64) float64 {
	v, ok := p.spec.Params[key]
	p.used[key] = true
	if !ok {
		return def
	}
	f, err := strconv.ParseFloat(v, 64)
	if err != nil || f < min || f != f {
		p.fail(fmt.Errorf("%w: %s: %s=%q must be a number >= %g", ErrBadSpec, p.spec.Name, key, v, min))
		return def
	}
	return f
}

func (p *params) fail(err error) {
	if p.err == nil {
		p.err = err
	}
}

// done reports the first bad parameter, or the first unknown one.
func (p *params) done() error {
	if p.err != nil {
		return p.err
	}
	keys := make([]string, 0)
	for k := range p.spec.Params {
		if !p.used[k] {
			keys = append(keys, k)
		}
	}
	sort.Strings(keys)
	if len(keys) > 0 {
		return fmt.Errorf("%w: %s: unknown parameter %q", ErrBadSpec, p.spec.Name, keys[0])
	}
	return nil
}
