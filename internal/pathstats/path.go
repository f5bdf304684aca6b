package pathstats

import "strings"

// PathSeparator joins the elements of a path key.
const PathSeparator = " → "

// PathEllipsis stands for the elements PathKey leaves out of a long path.
const PathEllipsis = "…"

// CollapseRepeats appends in to dst with consecutive duplicates removed
// (A A B A -> A B A) and returns the extended slice, like append. Pass
// dst[:0] to reuse a buffer; in[:0] collapses in place.
func CollapseRepeats(dst, in []string) []string {
	for i, s := range in {
		if i > 0 && s == in[i-1] {
			continue
		}
		dst = append(dst, s)
	}
	return dst
}

// PathKey returns the display and counting key of a path: the path with
// consecutive repeats collapsed, joined with PathSeparator. When maxLen > 0
// and the collapsed path has more than maxLen elements, the key keeps its
// first maxLen−1 elements, then PathEllipsis, then its last element, so it
// shows maxLen elements of the path (the ellipsis is not counted):
//
//	PathKey([a a b c d e], 3) = "a → b → … → e"
//	PathKey([a b c d], 1)     = "… → d"
//	PathKey([a b c], 3)       = "a → b → c"
//
// maxLen <= 0 means no limit; an empty path gives "". Paths that differ only
// in their elided middle share a key, and an element containing
// PathSeparator makes keys ambiguous; the key is for display and counting,
// not for recovering the path.
func PathKey(path []string, maxLen int) string {
	n := 0 // collapsed length
	for i, s := range path {
		if i == 0 || s != path[i-1] {
			n++
		}
	}
	if n == 0 {
		return ""
	}
	var b strings.Builder
	written := 0
	write := func(s string) {
		if written > 0 {
			b.WriteString(PathSeparator)
		}
		b.WriteString(s)
		written++
	}
	if maxLen <= 0 || n <= maxLen {
		for i, s := range path {
			if i == 0 || s != path[i-1] {
				write(s)
			}
		}
		return b.String()
	}
	kept := 0
	for i, s := range path {
		if kept == maxLen-1 {
			break
		}
		if i == 0 || s != path[i-1] {
			write(s)
			kept++
		}
	}
	write(PathEllipsis)
	write(path[len(path)-1])
	return b.String()
}
