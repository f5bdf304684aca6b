package event

import (
	"encoding/json"
	"strconv"
	"time"
)

// AppendJSON appends e as one JSON object in the event contract's format, so
// that Decoder.Decode gives e back (times in RFC 3339 with nanoseconds,
// values as exact decimals of their micro-units).
func AppendJSON(dst []byte, e *Event) []byte {
	str := func(k, v string) {
		b, _ := json.Marshal(v)
		dst = append(dst, ',', '"')
		dst = append(dst, k...)
		dst = append(dst, '"', ':')
		dst = append(dst, b...)
	}
	dst = append(dst, `{"v":1`...)
	str("id", e.ID)
	str("user", e.User)
	str("time", e.Time.UTC().Format(time.RFC3339Nano))
	str("kind", e.Kind.String())
	switch e.Kind {
	case Touch:
		str("channel", e.Channel)
		if e.Campaign != "" {
			str("campaign", e.Campaign)
		}
		str("interaction", e.Interaction.String())
	case Action:
		str("action", e.Action)
		if e.HasValue {
			dst = append(dst, `,"value":`...)
			dst = strconv.AppendInt(dst, e.Value/ValueScale, 10)
			frac := e.Value % ValueScale
			dst = append(dst, '.')
			s := strconv.FormatInt(frac+ValueScale, 10)[1:] // six digits, leading zeros kept
			dst = append(dst, s...)
		}
	}
	if e.Currency != "" {
		str("currency", e.Currency)
	}
	return append(dst, '}')
}
