package config

import (
	"bytes"
	"flag"
	"fmt"
	"os"
	"strings"
	"testing"

	"gopkg.in/yaml.v3"
)

var update = flag.Bool("update", false, "rewrite the key table in docs/configuration.md from keyDocs and Default")

const (
	docPath       = "../../docs/configuration.md"
	tableBegin    = "<!-- keys:begin: generated from internal/config/keys.go by `go test ./internal/config -update` -->\n"
	tableEnd      = "<!-- keys:end -->\n"
	exampleMarker = "<!-- example: parsed by TestConfigurationDoc -->\n```yaml\n"
)

// TestConfigurationDoc keeps docs/configuration.md in step with the code: its
// key table equals the one generated from keyDocs and Default, and its
// example file parses.
func TestConfigurationDoc(t *testing.T) {
	page, err := os.ReadFile(docPath)
	if err != nil {
		t.Fatal(err)
	}
	begin := bytes.Index(page, []byte(tableBegin))
	end := bytes.Index(page, []byte(tableEnd))
	if begin < 0 || end < begin {
		t.Fatalf("%s lacks the key table markers", docPath)
	}
	table, err := keyTable()
	if err != nil {
		t.Fatal(err)
	}
	got := string(page[begin+len(tableBegin) : end])
	if *update {
		fresh := string(page[:begin+len(tableBegin)]) + table + string(page[end:])
		if err := os.WriteFile(docPath, []byte(fresh), 0o644); err != nil {
			t.Fatal(err)
		}
	} else if got != table {
		t.Errorf("%s key table is out of date; run go test ./internal/config -update\ngot:\n%s\nwant:\n%s", docPath, got, table)
	}

	example := bytes.Index(page, []byte(exampleMarker))
	if example < 0 {
		t.Fatalf("%s lacks the example marker", docPath)
	}
	text := page[example+len(exampleMarker):]
	text = text[:bytes.Index(text, []byte("```"))]
	if _, err := Parse(text); err != nil {
		t.Errorf("the example in %s does not parse: %v\n%s", docPath, err, text)
	}
}

// keyTable renders the markdown table of every key with its default.
func keyTable() (string, error) {
	var root yaml.Node
	if err := root.Encode(Default()); err != nil {
		return "", err
	}
	defaults := map[string]string{}
	var walk func(n *yaml.Node, prefix string)
	walk = func(n *yaml.Node, prefix string) {
		for i := 0; i+1 < len(n.Content); i += 2 {
			path := prefix + n.Content[i].Value
			value := n.Content[i+1]
			if value.Kind == yaml.MappingNode {
				walk(value, path+".")
				continue
			}
			defaults[path] = "`" + flow(value) + "`"
		}
	}
	walk(&root, "")

	var b strings.Builder
	b.WriteString("| key | default | meaning |\n|---|---|---|\n")
	for _, k := range keyDocs {
		def, ok := defaults[k.Key]
		if !ok {
			def = "(section)"
		}
		fmt.Fprintf(&b, "| `%s` | %s | %s |\n", k.Key, def, k.Doc)
	}
	return b.String(), nil
}

// flow writes a node in YAML flow style on one line.
func flow(n *yaml.Node) string {
	switch n.Kind {
	case yaml.SequenceNode:
		parts := make([]string, len(n.Content))
		for i, c := range n.Content {
			parts[i] = flow(c)
		}
		return "[" + strings.Join(parts, ", ") + "]"
	case yaml.MappingNode:
		parts := make([]string, 0, len(n.Content)/2)
		for i := 0; i+1 < len(n.Content); i += 2 {
			parts = append(parts, n.Content[i].Value+": "+flow(n.Content[i+1]))
		}
		return "{" + strings.Join(parts, ", ") + "}"
	}
	if n.Value == "" {
		return `""`
	}
	return n.Value
}
