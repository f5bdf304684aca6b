package stream

import (
	"reflect"
	"strings"
	"testing"
	"time"
)

func TestUserKeyAndSubject(t *testing.T) {
	// XXH64 with seed 0 of "" and "abc": the xxHash reference test vectors
	// (github.com/Cyan4973/xxHash, from memory; cespare/xxhash agrees).
	tests := []struct {
		user, kind, wantKey, wantSubject string
	}{
		{"", KindAction, "ef46db3751d8e999", "tl.in.action.ef46db3751d8e999"},
		{"abc", KindTouch, "44bc2cf5ad770999", "tl.in.touch.44bc2cf5ad770999"},
	}
	for _, tt := range tests {
		if got := UserKey(tt.user); got != tt.wantKey {
			t.Errorf("UserKey(%q) = %s, want %s", tt.user, got, tt.wantKey)
		}
		if got := Subject("tl", tt.kind, tt.user); got != tt.wantSubject {
			t.Errorf("Subject(%q) = %s, want %s", tt.user, got, tt.wantSubject)
		}
	}
	// Any user id, even one with subject characters, gives one safe token.
	for _, u := range []string{"a.b", "*", ">", "x y", "ü", strings.Repeat("z", 300)} {
		k := UserKey(u)
		if len(k) != 16 || strings.Trim(k, "0123456789abcdef") != "" {
			t.Errorf("UserKey(%q) = %q, want 16 lowercase hex digits", u, k)
		}
	}
}

func TestConfigSubjects(t *testing.T) {
	c := DefaultConfig()
	c.Prefix, c.Partitions = "shop", 8
	tests := []struct{ got, want string }{
		{c.InputSubjects(), "shop.in.*.*"},
		{c.PartitionMapping(), "shop.ev.{{partition(8,2)}}.{{wildcard(1)}}.{{wildcard(2)}}"},
		{c.EventSubjects(), "shop.ev.>"},
		{c.DeadSubjects(), "shop.dead.>"},
		{c.DeadSubject("bad_time"), "shop.dead.bad_time"},
		{c.PartitionSubject(3), "shop.ev.3.>"},
		{ConsumerName(Partitions{2, 5}), "tl-worker-2-5"},
		{c.SourceName(Partitions{0, 7}), "stream:TL_EVENTS:0-7"},
	}
	for i, tt := range tests {
		if tt.got != tt.want {
			t.Errorf("%d: got %q, want %q", i, tt.got, tt.want)
		}
	}
	if got, want := c.Filters(Partitions{1, 3}), []string{"shop.ev.1.>", "shop.ev.2.>", "shop.ev.3.>"}; !reflect.DeepEqual(got, want) {
		t.Errorf("Filters = %v, want %v", got, want)
	}
}

func TestParsePartitions(t *testing.T) {
	tests := []struct {
		in      string
		n       int
		want    Partitions
		wantErr bool
	}{
		{"", 16, Partitions{0, 15}, false},
		{"0-7", 16, Partitions{0, 7}, false},
		{"8-15", 16, Partitions{8, 15}, false},
		{"5", 16, Partitions{5, 5}, false},
		{" 2 - 3 ", 4, Partitions{2, 3}, false},
		{"7-3", 16, Partitions{}, true},
		{"0-16", 16, Partitions{}, true},
		{"-1", 16, Partitions{}, true},
		{"a-b", 16, Partitions{}, true},
		{"1-", 16, Partitions{}, true},
	}
	for _, tt := range tests {
		got, err := ParsePartitions(tt.in, tt.n)
		if (err != nil) != tt.wantErr || (!tt.wantErr && got != tt.want) {
			t.Errorf("ParsePartitions(%q, %d) = %v, %v; want %v, error %v", tt.in, tt.n, got, err, tt.want, tt.wantErr)
		}
	}
}

func TestConfigValidate(t *testing.T) {
	tests := []struct {
		name   string
		change func(*Config)
		ok     bool
	}{
		{"defaults", func(*Config) {}, true},
		{"empty prefix", func(c *Config) { c.Prefix = "" }, false},
		{"dotted prefix", func(c *Config) { c.Prefix = "a.b" }, false},
		{"wildcard prefix", func(c *Config) { c.Prefix = "*" }, false},
		{"stream with dot", func(c *Config) { c.Stream = "A.B" }, false},
		{"same streams", func(c *Config) { c.DeadStream = c.Stream }, false},
		{"no partitions", func(c *Config) { c.Partitions = 0 }, false},
		{"too many partitions", func(c *Config) { c.Partitions = 5000 }, false},
		{"replicas 3", func(c *Config) { c.Replicas = 3 }, true},
		{"replicas 0", func(c *Config) { c.Replicas = 0 }, false},
		{"window beyond max age", func(c *Config) { c.Duplicates = 2 * c.MaxAge }, false},
		{"zero fetch batch", func(c *Config) { c.FetchBatch = 0 }, false},
		{"tiny fetch wait", func(c *Config) { c.FetchWait = time.Millisecond }, false},
		{"ack pending below batch", func(c *Config) { c.MaxAckPending = c.FetchBatch - 1 }, false},
		{"watchdog below fetch wait", func(c *Config) { c.WatchdogTimeout = c.FetchWait / 2 }, false},
		{"zero tick", func(c *Config) { c.TickInterval = 0 }, false},
	}
	for _, tt := range tests {
		c := DefaultConfig()
		tt.change(&c)
		if err := c.Validate(); (err == nil) != tt.ok {
			t.Errorf("%s: Validate() = %v, want ok=%v", tt.name, err, tt.ok)
		}
	}
}

func TestConnectOptionsValidate(t *testing.T) {
	tests := []struct {
		name string
		o    ConnectOptions
		ok   bool
	}{
		{"url only", ConnectOptions{URL: "nats://127.0.0.1:4222"}, true},
		{"no url", ConnectOptions{}, false},
		{"user and token", ConnectOptions{URL: "nats://h", User: "u", Password: "p", Token: "t"}, false},
		{"creds and nkey", ConnectOptions{URL: "nats://h", CredsFile: "c", NKeyFile: "n"}, false},
		{"cert without key", ConnectOptions{URL: "nats://h", CertFile: "c"}, false},
		{"tls and token", ConnectOptions{URL: "tls://h", Token: "t", CAFile: "ca", CertFile: "c", KeyFile: "k"}, true},
	}
	for _, tt := range tests {
		if err := tt.o.Validate(); (err == nil) != tt.ok {
			t.Errorf("%s: Validate() = %v, want ok=%v", tt.name, err, tt.ok)
		}
	}
}

// TestParsePartitionsMessages (issue 9 item 10): a reversed range says so
// (the old message was "not inside 0-15").
func TestParsePartitionsMessages(t *testing.T) {
	for in, want := range map[string]string{
		"9-3":  "the first (9) is after the last (3)",
		"3-16": "not inside 0-15",
		"x":    "want N or FIRST-LAST",
	} {
		if _, err := ParsePartitions(in, 16); err == nil || !strings.Contains(err.Error(), want) {
			t.Errorf("%q: %v, want %q", in, err, want)
		}
	}
	if p, err := ParsePartitions("3-9", 16); err != nil || p != (Partitions{3, 9}) {
		t.Errorf("3-9: %v %v", p, err)
	}
}
