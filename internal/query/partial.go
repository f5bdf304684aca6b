package query

import (
	"fmt"
	"io"
	"slices"
	"strconv"
	"strings"
)

// FormatPartitions writes partition numbers as sorted, merged ranges:
// [8 9 10 3] → "3, 8-10".
func FormatPartitions(ps []int) string {
	s := slices.Clone(ps)
	slices.Sort(s)
	s = slices.Compact(s)
	var b strings.Builder
	for i := 0; i < len(s); {
		j := i
		for j+1 < len(s) && s[j+1] == s[j]+1 {
			j++
		}
		if b.Len() > 0 {
			b.WriteString(", ")
		}
		b.WriteString(strconv.Itoa(s[i]))
		if j > i {
			b.WriteString("-" + strconv.Itoa(s[j]))
		}
		i = j + 1
	}
	return b.String()
}

// PartialWarning says which partitions did not answer, e.g. "partial answer:
// partitions 8-15 did not answer"; it is empty when none are missing.
func PartialWarning(missing []int) string {
	switch len(missing) {
	case 0:
		return ""
	case 1:
		return "partial answer: partition " + strconv.Itoa(missing[0]) + " did not answer"
	}
	return "partial answer: partitions " + FormatPartitions(missing) + " did not answer"
}

// writePartial puts the partial-answer warning on the first line of a table
// or CSV answer (in CSV as a "#" comment line, so a reader that does not
// expect it fails instead of taking the rows as complete). JSON answers carry
// missing_partitions instead.
func writePartial(w io.Writer, missing []int, f Format) error {
	msg := PartialWarning(missing)
	if msg == "" || f == JSON {
		return nil
	}
	if f == CSV {
		msg = "# " + msg
	}
	_, err := fmt.Fprintln(w, msg)
	return err
}
