package models

import (
	"slices"
	"strings"
	"unicode"
	"unicode/utf8"
)

// Token namespaces keep a tag "red" and a title word "red" apart, and a
// category "sale" apart from both.
const (
	tokCategory = "cat:" // one token per category path prefix
	tokTag      = "tag:"
	tokWord     = "w:" // title and description words
)

// maxTokenBytes bounds one token, so one odd attribute value cannot hold
// memory hostage; longer values are cut.
const maxTokenBytes = 96

// Kinds of attribute key: a few keys have a meaning of their own; every
// other key becomes key=value tokens.
const (
	attrOther = iota
	attrCategory
	attrTag
	attrText
)

// attrKind classifies an attribute key, compared lower-cased.
func attrKind(key string) int {
	switch strings.ToLower(strings.TrimSpace(key)) {
	case "category", "categories", "category_path", "cat":
		return attrCategory
	case "tags", "tag", "keywords":
		return attrTag
	case "title", "name", "description", "desc", "text":
		return attrText
	}
	return attrOther
}

// NormalizeCategory writes a category path the way the catalogue keeps it:
// segments split at '/' or '>', trimmed, lower-cased, joined by '/'.
// "Camping > Tents" and "camping/tents" are the same path.
func NormalizeCategory(path string) string {
	segs := strings.FieldsFunc(path, func(r rune) bool { return r == '/' || r == '>' })
	out := segs[:0]
	for _, s := range segs {
		if s = strings.ToLower(strings.TrimSpace(s)); s != "" {
			out = append(out, s)
		}
	}
	return strings.Join(out, "/")
}

// categoryPaths returns the distinct normalised category paths of attrs,
// sorted.
func categoryPaths(attrs map[string][]string) []string {
	var out []string
	for k, vals := range attrs {
		if attrKind(k) != attrCategory {
			continue
		}
		for _, v := range vals {
			if p := NormalizeCategory(v); p != "" {
				out = append(out, p)
			}
		}
	}
	slices.Sort(out)
	return slices.Compact(out)
}

// Tokens turns catalogue attributes into the content model's terms, in a
// deterministic order, repeats kept (they are term frequencies):
//
//   - a category path "camping/tents" gives one token per prefix,
//     cat:camping and cat:camping/tents, so items in sibling categories
//     still share their parent;
//   - each tag gives tag:<tag>, lower-cased;
//   - title and description words give w:<word>: runs of letters and
//     digits, lower-cased, words of one character dropped (common practice
//     in text retrieval: they carry little meaning);
//   - any other attribute gives key=value, both lower-cased.
func Tokens(attrs map[string][]string) []string {
	keys := make([]string, 0, len(attrs))
	for k := range attrs {
		keys = append(keys, k)
	}
	slices.Sort(keys)
	var out []string
	for _, k := range keys {
		lk := strings.ToLower(strings.TrimSpace(k))
		kind := attrKind(k)
		for _, v := range attrs[k] {
			switch kind {
			case attrCategory:
				p := NormalizeCategory(v)
				for i := 0; i < len(p); i++ {
					if p[i] == '/' {
						out = append(out, clip(tokCategory+p[:i]))
					}
				}
				if p != "" {
					out = append(out, clip(tokCategory+p))
				}
			case attrTag:
				if t := strings.ToLower(strings.TrimSpace(v)); t != "" {
					out = append(out, clip(tokTag+t))
				}
			case attrText:
				for _, w := range words(v) {
					out = append(out, clip(tokWord+w))
				}
			default:
				if t := strings.ToLower(strings.TrimSpace(v)); t != "" && lk != "" {
					out = append(out, clip(lk+"="+t))
				}
			}
		}
	}
	return out
}

// words splits text into lower-cased runs of letters and digits of at least
// two characters.
func words(text string) []string {
	f := strings.FieldsFunc(text, func(r rune) bool { return !unicode.IsLetter(r) && !unicode.IsDigit(r) })
	out := f[:0]
	for _, w := range f {
		if utf8.RuneCountInString(w) >= 2 {
			out = append(out, strings.ToLower(w))
		}
	}
	return out
}

// clip cuts a token to maxTokenBytes on a rune boundary.
func clip(t string) string {
	if len(t) <= maxTokenBytes {
		return t
	}
	n := maxTokenBytes
	for n > 0 && !utf8.RuneStart(t[n]) {
		n--
	}
	return t[:n]
}
