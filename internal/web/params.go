package web

import (
	"fmt"
	"mime"
	"net/http"
	"net/url"
	"strconv"
	"strings"

	"github.com/touchledger/touchledger/internal/query"
)

// requestOf reads a URL's parameters (format aside, which only picks the
// rendering) into a request of kind k. Each parameter may appear once.
func requestOf(k query.Kind, v url.Values) (query.Request, error) {
	m := make(map[string]string, len(v))
	for name, vals := range v {
		if name == "format" {
			continue
		}
		if len(vals) > 1 {
			return query.Request{}, fmt.Errorf("%s: given %d times", name, len(vals))
		}
		m[name] = vals[0]
	}
	return query.ParseRequest(k, m)
}

func badf(format string, a ...any) error { return fmt.Errorf(format, a...) }

// Media types of the answers.
const (
	contentJSON = "application/json"
	contentCSV  = "text/csv; charset=utf-8"
)

// responseFormat picks JSON or CSV: the format parameter when given (json or
// csv), else the Accept header's preference between application/json and
// text/csv (highest q wins, the earlier one on a tie), else JSON.
func responseFormat(r *http.Request) (query.Format, error) {
	if v := r.URL.Query()["format"]; len(v) > 0 {
		switch query.Format(v[0]) {
		case query.JSON, query.CSV:
			return query.Format(v[0]), nil
		}
		return "", badf("unknown format %q: use json or csv", v[0])
	}
	best, bestQ := query.JSON, 0.0
	for _, part := range strings.Split(strings.Join(r.Header.Values("Accept"), ","), ",") {
		mt, ps, err := mime.ParseMediaType(strings.TrimSpace(part))
		if err != nil {
			continue
		}
		q := 1.0
		if s, ok := ps["q"]; ok {
			if q, err = strconv.ParseFloat(s, 64); err != nil || q < 0 || q > 1 {
				continue
			}
		}
		var f query.Format
		switch mt {
		case "text/csv":
			f = query.CSV
		case "application/json":
			f = query.JSON
		default:
			continue
		}
		if q > bestQ {
			best, bestQ = f, q
		}
	}
	return best, nil
}
