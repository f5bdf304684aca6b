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

// PathSteps returns the displayed steps of a path: the path with
// consecutive repeats collapsed and, when maxLen > 0 and the collapsed path
// has more than maxLen steps, cut to its first maxLen−1 steps, then
// PathEllipsis, then its last step, so it shows maxLen steps of the path
// (the ellipsis is not counted):
//
//	PathSteps([a a b c d e], 3) = [a b … e]
//	PathSteps([a b c d], 1)     = [… d]
//	PathSteps([a b c], 3)       = [a b c]
//
// maxLen <= 0 means no limit; an empty path gives nil. Paths that differ
// only in their elided middle share their steps.
func PathSteps(path []string, maxLen int) []string {
	collapsed := CollapseRepeats(nil, path)
	if maxLen <= 0 || len(collapsed) <= maxLen {
		return collapsed
	}
	last := collapsed[len(collapsed)-1]
	return append(collapsed[:maxLen-1], PathEllipsis, last)
}

// PathKey returns the display and counting key of a path: PathSteps joined
// with PathSeparator:
//
//	PathKey([a a b c d e], 3) = "a → b → … → e"
//	PathKey([a b c d], 1)     = "… → d"
//	PathKey([a b c], 3)       = "a → b → c"
//
// An empty path gives "". An element containing PathSeparator makes keys
// ambiguous; the key is for display and counting, not for recovering the
// path (answers carry PathSteps as a list for that).
func PathKey(path []string, maxLen int) string {
	return strings.Join(PathSteps(path, maxLen), PathSeparator)
}
