package config

import (
	"io/fs"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"testing"
)

// TestReferencesCited keeps the citations of docs/references.md honest
// across the repository: every "docs/references.md §N" names a section that
// exists, every "§3 EXk" a Markov example the page defines, and no file
// points at a reference list outside the repository.
func TestReferencesCited(t *testing.T) {
	const root = "../.."
	page, err := os.ReadFile(filepath.Join(root, "docs", "references.md"))
	if err != nil {
		t.Fatal(err)
	}
	sections := map[string]bool{}
	for _, m := range regexp.MustCompile(`(?m)^## §(\d+) `).FindAllStringSubmatch(string(page), -1) {
		sections[m[1]] = true
	}
	examples := map[string]bool{}
	for _, m := range regexp.MustCompile(`\*\*(EX\d+[ab]?)\*\*`).FindAllStringSubmatch(string(page), -1) {
		examples[m[1]] = true
	}
	if len(sections) < 9 || len(examples) < 7 {
		t.Fatalf("docs/references.md: %d sections, %d Markov examples; want §1–§9 and EX1–EX6", len(sections), len(examples))
	}
	cite := regexp.MustCompile(`docs/references\.md §(\d+)(?:\s+(EX\d+[ab]?))?`)
	outside := []string{"check-" + "values", "/work/" + "shared", "shared/" + "reference"}
	cited := 0
	err = filepath.WalkDir(root, func(path string, d fs.DirEntry, err error) error {
		if err != nil {
			return err
		}
		if d.IsDir() {
			if name := d.Name(); name == ".git" || name == "testdata" || strings.HasPrefix(name, "tl-") {
				return filepath.SkipDir
			}
			return nil
		}
		switch filepath.Ext(path) {
		case ".go", ".md", ".yml", ".yaml", ".sh", ".py":
		default:
			return nil
		}
		b, err := os.ReadFile(path)
		if err != nil {
			return err
		}
		text := string(b)
		for _, o := range outside {
			if strings.Contains(text, o) {
				t.Errorf("%s points outside the repository (%q); cite docs/references.md", path, o)
			}
		}
		for _, m := range cite.FindAllStringSubmatch(text, -1) {
			cited++
			if !sections[m[1]] {
				t.Errorf("%s cites docs/references.md §%s, which has no such section", path, m[1])
			}
			if m[2] != "" && !examples[m[2]] {
				t.Errorf("%s cites docs/references.md §%s %s, which the page does not define", path, m[1], m[2])
			}
		}
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	if cited < 50 {
		t.Errorf("only %d citations of docs/references.md found; the walk missed the sources", cited)
	}
}
