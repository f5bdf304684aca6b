package pathstats

import (
	"slices"
	"strings"
	"testing"
)

func TestCollapseRepeats(t *testing.T) {
	tests := []struct {
		in, want []string
	}{
		{[]string{"A", "A", "B", "A"}, []string{"A", "B", "A"}}, // the example of the brief
		{[]string{"A", "A", "A"}, []string{"A"}},
		{[]string{"A", "B", "C"}, []string{"A", "B", "C"}},
		{nil, nil},
		{[]string{"", "", "x"}, []string{"", "x"}},
	}
	for _, tt := range tests {
		if got := CollapseRepeats(nil, tt.in); !slices.Equal(got, tt.want) {
			t.Errorf("CollapseRepeats(%q) = %q, want %q", tt.in, got, tt.want)
		}
		// Appends after what dst already holds.
		if got, want := CollapseRepeats([]string{"@entry"}, tt.in), append([]string{"@entry"}, tt.want...); !slices.Equal(got, want) {
			t.Errorf("CollapseRepeats([@entry], %q) = %q, want %q", tt.in, got, want)
		}
		// In place.
		buf := slices.Clone(tt.in)
		if got := CollapseRepeats(buf[:0], buf); !slices.Equal(got, tt.want) {
			t.Errorf("in-place CollapseRepeats(%q) = %q, want %q", tt.in, got, tt.want)
		}
	}
}

func TestPathKey(t *testing.T) {
	tests := []struct {
		name   string
		path   []string
		maxLen int
		want   string
	}{
		{"collapsed then cut", []string{"a", "a", "b", "c", "d", "e"}, 3, "a → b → … → e"},
		{"max 1", []string{"a", "b", "c", "d"}, 1, "… → d"},
		{"exactly max", []string{"a", "b", "c"}, 3, "a → b → c"},
		{"fits after collapsing", []string{"a", "b", "b", "b", "c"}, 3, "a → b → c"},
		{"one over", []string{"a", "b", "c", "d"}, 3, "a → b → … → d"},
		{"repeats at the end", []string{"a", "b", "c", "d", "e", "e"}, 2, "a → … → e"},
		{"no limit", []string{"product_view", "basket_add", "product_view"}, 0, "product_view → basket_add → product_view"},
		{"single", []string{"home"}, 3, "home"},
		{"empty", nil, 3, ""},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			if got := PathKey(tt.path, tt.maxLen); got != tt.want {
				t.Errorf("PathKey(%q, %d) = %q, want %q", tt.path, tt.maxLen, got, tt.want)
			}
		})
	}
}

func TestPathKeyAgreesWithCollapse(t *testing.T) {
	// PathKey without a limit is the collapsed path joined; with a limit it
	// shows maxLen elements of it (doc comment).
	paths := [][]string{
		{"a", "b", "a", "a", "c", "d", "d", "e", "f"},
		{"x", "x", "x"},
		{"p", "q"},
	}
	for _, p := range paths {
		collapsed := CollapseRepeats(nil, p)
		if got, want := PathKey(p, 0), strings.Join(collapsed, PathSeparator); got != want {
			t.Errorf("PathKey(%q, 0) = %q, want %q", p, got, want)
		}
		for maxLen := 1; maxLen <= len(collapsed)+1; maxLen++ {
			parts := strings.Split(PathKey(p, maxLen), PathSeparator)
			shown := len(parts)
			if slices.Contains(parts, PathEllipsis) {
				shown--
			}
			if want := min(maxLen, len(collapsed)); shown != want {
				t.Errorf("PathKey(%q, %d) shows %d elements, want %d", p, maxLen, shown, want)
			}
			if parts[len(parts)-1] != collapsed[len(collapsed)-1] {
				t.Errorf("PathKey(%q, %d) = %q does not end with the last element", p, maxLen, parts)
			}
		}
	}
}
