package config

import (
	"reflect"
	"testing"
)

// FuzzParse checks that Parse never panics, and that whatever it accepts is
// valid and survives YAML() and Parse again unchanged.
//
// Seeds live in testdata/fuzz/FuzzParse. Run: go test -fuzz=FuzzParse ./internal/config
func FuzzParse(f *testing.F) {
	f.Fuzz(func(t *testing.T, data []byte) {
		c, err := Parse(data)
		if err != nil {
			return
		}
		if err := c.Validate(); err != nil {
			t.Fatalf("Parse accepted an invalid configuration: %v", err)
		}
		text, err := c.YAML()
		if err != nil {
			t.Fatalf("YAML() of an accepted configuration: %v", err)
		}
		again, err := Parse(text)
		if err != nil {
			t.Fatalf("Parse(YAML()) error: %v\n%s", err, text)
		}
		if !reflect.DeepEqual(again, c) {
			t.Fatalf("Parse(YAML()) changed the configuration\n got %+v\nwant %+v", again, c)
		}
	})
}
