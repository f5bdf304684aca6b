package dashboard

import (
	"bytes"
	"encoding/xml"
	"flag"
	"io"
	"os"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"testing"
)

// update rewrites the golden files under testdata/ and the screenshot
// docs/dashboard.png: go test ./internal/dashboard -update
var update = flag.Bool("update", false, "rewrite golden files and the dashboard screenshot")

// golden compares got with testdata/name, or rewrites it with -update.
func golden(t *testing.T, name string, got []byte) {
	t.Helper()
	path := filepath.Join("testdata", name)
	if *update {
		if err := os.WriteFile(path, got, 0o644); err != nil {
			t.Fatal(err)
		}
		return
	}
	want, err := os.ReadFile(path)
	if err != nil {
		t.Fatalf("%v (run go test ./internal/dashboard -update to create it)", err)
	}
	if !bytes.Equal(got, want) {
		t.Errorf("%s differs from the golden file (review, then go test ./internal/dashboard -update):\n%s", name, firstDiff(got, want))
	}
}

// firstDiff shows the first differing line.
func firstDiff(got, want []byte) string {
	g, w := strings.Split(string(got), "\n"), strings.Split(string(want), "\n")
	for i := 0; i < len(g) || i < len(w); i++ {
		var gl, wl string
		if i < len(g) {
			gl = g[i]
		}
		if i < len(w) {
			wl = w[i]
		}
		if gl != wl {
			return "line " + strconv.Itoa(i+1) + ":\n got: " + gl + "\nwant: " + wl
		}
	}
	return ""
}

// xnode is a parsed XML element.
type xnode struct {
	name     string
	attr     map[string]string
	children []*xnode
	text     string // character data directly inside
}

// parseXML parses a document strictly (encoding/xml in strict mode): a
// stray "<" or an unescaped quote in an attribute fails here.
func parseXML(t testing.TB, doc []byte) *xnode {
	t.Helper()
	d := xml.NewDecoder(bytes.NewReader(doc))
	d.Strict = true
	root := &xnode{name: "#document"}
	stack := []*xnode{root}
	for {
		tok, err := d.Token()
		if err == io.EOF {
			break
		}
		if err != nil {
			t.Fatalf("not well-formed XML: %v\n%s", err, clip(string(doc), 400))
		}
		switch tk := tok.(type) {
		case xml.StartElement:
			n := &xnode{name: tk.Name.Local, attr: map[string]string{}}
			for _, a := range tk.Attr {
				n.attr[a.Name.Local] = a.Value
			}
			top := stack[len(stack)-1]
			top.children = append(top.children, n)
			stack = append(stack, n)
		case xml.EndElement:
			stack = stack[:len(stack)-1]
		case xml.CharData:
			stack[len(stack)-1].text += string(tk)
		}
	}
	if len(root.children) != 1 {
		t.Fatalf("want one root element, got %d", len(root.children))
	}
	return root.children[0]
}

// all returns the elements under n (n included) for which keep is true.
func (n *xnode) all(keep func(*xnode) bool) []*xnode {
	var out []*xnode
	var walk func(*xnode)
	walk = func(x *xnode) {
		if keep(x) {
			out = append(out, x)
		}
		for _, c := range x.children {
			walk(c)
		}
	}
	walk(n)
	return out
}

// withAttr keeps elements that have attribute a.
func withAttr(a string) func(*xnode) bool {
	return func(x *xnode) bool { _, ok := x.attr[a]; return ok }
}

// title is the text of the element's <title> child.
func (n *xnode) title() string {
	for _, c := range n.children {
		if c.name == "title" {
			return c.text
		}
	}
	return ""
}

var svgInPage = regexp.MustCompile(`(?s)<svg .*?</svg>`)

// pageCharts parses every SVG of a page, by its data-chart kind and id
// prefix (from aria-labelledby).
func pageCharts(t testing.TB, page []byte) map[string]*xnode {
	t.Helper()
	out := map[string]*xnode{}
	for _, m := range svgInPage.FindAll(page, -1) {
		n := parseXML(t, m)
		id := strings.TrimSuffix(strings.Fields(n.attr["aria-labelledby"])[0], "-title")
		out[id] = n
	}
	return out
}

// float parses a data attribute.
func float(t testing.TB, s string) float64 {
	t.Helper()
	v, err := strconv.ParseFloat(s, 64)
	if err != nil {
		t.Fatalf("data value %q: %v", s, err)
	}
	return v
}
