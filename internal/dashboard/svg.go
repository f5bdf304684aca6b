package dashboard

import (
	"bytes"
	"encoding/xml"
	"math"
	"strconv"
	"strings"
	"unicode/utf8"
)

// svgWriter appends SVG markup to a buffer. Every attribute value and every
// text node goes through xml.EscapeText, so names from user data (channels,
// campaigns, actions) can never open an element or leave an attribute.
type svgWriter struct{ b bytes.Buffer }

// escape writes s as XML character data or attribute text: & < > " ' and
// the control characters are escaped, invalid code points become U+FFFD.
func (w *svgWriter) escape(s string) {
	// xml.EscapeText only fails when the writer fails; bytes.Buffer does not.
	_ = xml.EscapeText(&w.b, []byte(s))
}

// attrs writes ` k="v"` pairs; kv holds names and values alternately.
func (w *svgWriter) attrs(kv []string) {
	for i := 0; i+1 < len(kv); i += 2 {
		w.b.WriteByte(' ')
		w.b.WriteString(kv[i])
		w.b.WriteString(`="`)
		w.escape(kv[i+1])
		w.b.WriteByte('"')
	}
}

// open writes a start tag.
func (w *svgWriter) open(name string, kv ...string) {
	w.b.WriteByte('<')
	w.b.WriteString(name)
	w.attrs(kv)
	w.b.WriteString(">")
}

// close writes an end tag and a newline (the output stays diffable).
func (w *svgWriter) close(name string) {
	w.b.WriteString("</")
	w.b.WriteString(name)
	w.b.WriteString(">\n")
}

// empty writes a self-closing element.
func (w *svgWriter) empty(name string, kv ...string) {
	w.b.WriteByte('<')
	w.b.WriteString(name)
	w.attrs(kv)
	w.b.WriteString("/>\n")
}

// elem writes an element holding only text.
func (w *svgWriter) elem(name, text string, kv ...string) {
	w.open(name, kv...)
	w.escape(text)
	w.close(name)
}

// tip writes an element whose only child is a <title> tooltip (the
// accessible name of that mark), e.g. a bar with its exact numbers.
func (w *svgWriter) tip(name, title string, kv ...string) {
	w.open(name, kv...)
	w.elem("title", title)
	w.close(name)
}

// root opens the <svg> element with its accessible name and description.
func (w *svgWriter) root(kind string, f Frame, width, height float64) {
	id := f.id()
	w.open("svg",
		"xmlns", "http://www.w3.org/2000/svg",
		"viewBox", "0 0 "+num(width)+" "+num(height),
		"width", num(width), "height", num(height),
		"role", "img",
		"aria-labelledby", id+"-title "+id+"-desc",
		"class", "chart chart-"+kind,
		"data-chart", kind,
		"font-family", fontFamily,
		"font-size", "12",
	)
	w.b.WriteByte('\n')
	w.elem("title", f.Title, "id", id+"-title")
	w.elem("desc", f.Desc, "id", id+"-desc")
	w.empty("rect", "class", "background", "x", "0", "y", "0", "width", num(width), "height", num(height), "fill", colorBackground)
}

// bytes closes the root and returns the document.
func (w *svgWriter) bytes() []byte {
	w.close("svg")
	return bytes.Clone(w.b.Bytes())
}

// noData writes the message shown in place of an empty chart.
func (w *svgWriter) noData(x, y float64, msg string) {
	w.elem("text", msg, "class", "no-data", "x", num(x), "y", num(y), "text-anchor", "middle", "fill", colorMuted, "font-size", "14")
}

// fontFamily uses the reader's own fonts: nothing is downloaded.
const fontFamily = "system-ui, -apple-system, 'Segoe UI', Roboto, 'Noto Sans', sans-serif"

// num formats a coordinate: at most two decimals, no trailing zeros, never
// "-0". Rounding keeps the output short and identical across platforms.
func num(x float64) string {
	if math.IsNaN(x) || math.IsInf(x, 0) {
		return "0"
	}
	r := math.Round(x*100) / 100
	if r == 0 {
		return "0"
	}
	return strconv.FormatFloat(r, 'f', -1, 64)
}

// exact formats a data value so that strconv.ParseFloat gives back the same
// float64 (shortest round-trip form): the data-value attributes a test or a
// script reads are the query answer's numbers, not a rounding of them.
func exact(x float64) string { return strconv.FormatFloat(x, 'g', -1, 64) }

// exactInt formats a count.
func exactInt(n int64) string { return strconv.FormatInt(n, 10) }

// textWidth estimates the width of s in a sans-serif font of size px: 0.6 em
// per character is a generous average for Latin text, so labels laid out with
// it do not collide.
func textWidth(s string, px float64) float64 { return float64(utf8.RuneCountInString(s)) * 0.6 * px }

// clip shortens s to at most max characters, ending in "…" when cut.
func clip(s string, max int) string {
	if max < 1 || utf8.RuneCountInString(s) <= max {
		return s
	}
	r := []rune(s)
	return string(r[:max-1]) + "…"
}

// safeID keeps the characters of s allowed in our element ids.
func safeID(s string) string {
	var b strings.Builder
	for _, r := range strings.ToLower(s) {
		if (r >= 'a' && r <= 'z') || (r >= '0' && r <= '9') || r == '-' {
			b.WriteRune(r)
		}
	}
	if b.Len() == 0 {
		return "chart"
	}
	return b.String()
}
