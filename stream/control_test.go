package stream

import (
	"errors"
	"strings"
	"testing"
)

// TestDecodeControl: each command decodes, a message with none, two or a
// malformed one is refused with ErrInvalidEvent (the consumer then
// dead-letters it). The limits are this project's (FORMAT.md 4.5).
func TestDecodeControl(t *testing.T) {
	many := `{"served_batch":[` + strings.Repeat(`{"items":["a"],"ts":1},`, MaxServedBatch) + `{"items":["a"],"ts":1}]}`
	tests := []struct {
		name, in string
		ok       bool
		check    func(Control) bool
	}{
		{"forget", `{"forget":"v1"}`, true, func(c Control) bool { return c.Forget == "v1" }},
		{"served", `{"served":{"session":"v1","items":["a","b"],"ts":5,"request":"r-1"}}`, true,
			func(c Control) bool { return c.Served != nil && len(c.Served.Items) == 2 && c.Served.Request == "r-1" }},
		{"served batch", `{"served_batch":[{"session":"v1","items":["a"],"ts":5},{"items":["b"],"ts":6}]}`, true,
			func(c Control) bool { return len(c.ServedBatch) == 2 && c.ServedBatch[1].Items[0] == "b" }},
		{"prior", `{"prior":{"item":"a","neighbors":[{"item":"b","weight":0.5}]}}`, true,
			func(c Control) bool { return c.Prior != nil && c.Prior.Neighbors[0].Item == "b" }},
		{"nothing", `{}`, false, nil},
		{"two commands", `{"forget":"v1","served_batch":[{"items":["a"],"ts":1}]}`, false, nil},
		{"empty batch", `{"served_batch":[]}`, false, nil},
		{"batch too long", many, false, nil},
		{"batch record without items", `{"served_batch":[{"items":["a"],"ts":1},{"items":[],"ts":2}]}`, false, nil},
		{"batch record with a bad item", `{"served_batch":[{"items":["a\u0000b"],"ts":1}]}`, false, nil},
		{"served without items", `{"served":{"session":"v1","items":[]}}`, false, nil},
		{"not json", `{"forget":`, false, nil},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			c, err := DecodeControl([]byte(tt.in))
			if !tt.ok {
				if !errors.Is(err, ErrInvalidEvent) {
					t.Fatalf("got %v, want an ErrInvalidEvent", err)
				}
				return
			}
			if err != nil {
				t.Fatal(err)
			}
			if !tt.check(c) {
				t.Errorf("decoded %+v", c)
			}
		})
	}
}
