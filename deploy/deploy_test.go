package deploy

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"hash/fnv"
	"net"
	"net/url"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"slices"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/cespare/xxhash/v2"
	"github.com/nats-io/nats-server/v2/conf"
	"github.com/nats-io/nats-server/v2/server"
	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"
	"github.com/nats-io/nats.go/micro"
	"golang.org/x/crypto/bcrypt"
	"gopkg.in/yaml.v3"
)

// node is one server of the three-node cluster as nats/README.md documents it.
type node struct {
	name        string // server_name
	host        string // host name in the route URLs
	clientPort  int
	clusterPort int
	monitorPort int
}

var nodes = []node{
	{name: "n1", host: "nats-1", clientPort: 4222, clusterPort: 6222, monitorPort: 8222},
	{name: "n2", host: "nats-2", clientPort: 4223, clusterPort: 6223, monitorPort: 8223},
	{name: "n3", host: "nats-3", clientPort: 4224, clusterPort: 6224, monitorPort: 8224},
}

const (
	// The subject layout of nats/README.md.
	mappingSource = "tl.in.*.*"
	mappingDest   = "tl.ev.{{partition(16,2)}}.{{wildcard(1)}}.{{wildcard(2)}}"
	partitions    = 16

	// Test-only route password written into the temporary secrets.conf.
	testRoutePassword = "deploy-test-route-password"
)

// testPasswords are the test clients' passwords; the temporary secrets.conf
// holds their bcrypt hashes, as an operator's would.
var testPasswords = map[string]string{
	"publisher": "deploy-test-publisher",
	"worker":    "deploy-test-worker",
	"query":     "deploy-test-query",
	"admin":     "deploy-test-admin",
	"sys":       "deploy-test-sys",
}

// copyDir copies the regular files of src (one level deep) into dst.
func copyDir(t *testing.T, src, dst string) {
	t.Helper()
	entries, err := os.ReadDir(src)
	if err != nil {
		t.Fatal(err)
	}
	for _, e := range entries {
		if !e.Type().IsRegular() {
			continue
		}
		data, err := os.ReadFile(filepath.Join(src, e.Name()))
		if err != nil {
			t.Fatal(err)
		}
		if err := os.WriteFile(filepath.Join(dst, e.Name()), data, 0o600); err != nil {
			t.Fatal(err)
		}
	}
}

var hashLine = regexp.MustCompile(`(?m)^TL_([A-Z]+)_PASSWORD_HASH: ".*"$`)

// readExample reads one of the secrets templates of nats/.
func readExample(t *testing.T, name string) string {
	t.Helper()
	data, err := os.ReadFile(filepath.Join("nats", name+".example"))
	if err != nil {
		t.Fatal(err)
	}
	return string(data)
}

// noPlaceholderLeft fails if a setting (not a comment) still holds a
// placeholder after the test replaced every documented one.
func noPlaceholderLeft(t *testing.T, name, text string) {
	t.Helper()
	for _, line := range strings.Split(text, "\n") {
		if !strings.HasPrefix(strings.TrimSpace(line), "#") && strings.Contains(line, "<REPLACE") {
			t.Fatalf("%s: placeholder left after replacing every documented one: %s", name, line)
		}
	}
}

// testUserSecrets turns user-secrets.conf.example into a working file the
// way the example tells an operator to: every placeholder replaced by the
// bcrypt hash of that role's password.
func testUserSecrets(t *testing.T) string {
	t.Helper()
	var roles []string
	out := hashLine.ReplaceAllStringFunc(readExample(t, "user-secrets.conf"), func(line string) string {
		role := strings.ToLower(hashLine.FindStringSubmatch(line)[1])
		roles = append(roles, role)
		password, ok := testPasswords[role]
		if !ok {
			t.Errorf("user-secrets.conf.example has a password for role %q that the test does not know", role)
			return line
		}
		hash, err := bcrypt.GenerateFromPassword([]byte(password), bcrypt.MinCost)
		if err != nil {
			t.Fatal(err)
		}
		return fmt.Sprintf("TL_%s_PASSWORD_HASH: %q", strings.ToUpper(role), hash)
	})
	slices.Sort(roles)
	want := make([]string, 0, len(testPasswords))
	for role := range testPasswords {
		want = append(want, role)
	}
	slices.Sort(want)
	if !slices.Equal(roles, want) {
		t.Errorf("user-secrets.conf.example password roles = %v, want %v", roles, want)
	}
	noPlaceholderLeft(t, "user-secrets.conf", out)
	return out
}

// testRouteSecrets is route-secrets.conf.example with its one placeholder
// replaced everywhere, as the example says.
func testRouteSecrets(t *testing.T) string {
	t.Helper()
	out := strings.ReplaceAll(readExample(t, "route-secrets.conf"), "<REPLACE-route-password>", testRoutePassword)
	noPlaceholderLeft(t, "route-secrets.conf", out)
	return out
}

// natsDir is a temporary copy of nats/ with working secrets files.
func natsDir(t *testing.T) string {
	t.Helper()
	dir := t.TempDir()
	copyDir(t, "nats", dir)
	for name, text := range map[string]string{
		"user-secrets.conf":  testUserSecrets(t),
		"route-secrets.conf": testRouteSecrets(t),
	} {
		if err := os.WriteFile(filepath.Join(dir, name), []byte(text), 0o600); err != nil {
			t.Fatal(err)
		}
	}
	return dir
}

func loadNode(t *testing.T, dir string, n node) *server.Options {
	t.Helper()
	opts, err := server.ProcessConfigFile(filepath.Join(dir, n.name+".conf"))
	if err != nil {
		t.Fatalf("%s.conf: %v", n.name, err)
	}
	return opts
}

// TestNATSNodeConfigs parses every node's configuration with nats-server and
// checks ports, durable JetStream and that the routes name all three nodes.
func TestNATSNodeConfigs(t *testing.T) {
	dir := natsDir(t)
	wantRoutes := make([]string, 0, len(nodes))
	for _, n := range nodes {
		wantRoutes = append(wantRoutes, net.JoinHostPort(n.host, strconv.Itoa(n.clusterPort)))
	}
	storeDirs := map[string]string{}
	for _, n := range nodes {
		t.Run(n.name, func(t *testing.T) {
			opts := loadNode(t, dir, n)
			ints := []struct {
				what      string
				got, want int
			}{
				{"client port", opts.Port, n.clientPort},
				{"cluster port", opts.Cluster.Port, n.clusterPort},
				{"monitoring port", opts.HTTPPort, n.monitorPort},
			}
			for _, c := range ints {
				if c.got != c.want {
					t.Errorf("%s = %d, want %d", c.what, c.got, c.want)
				}
			}
			strs := []struct {
				what, got, want string
			}{
				{"server_name", opts.ServerName, n.name},
				{"cluster name", opts.Cluster.Name, "touchledger"},
				{"cluster user", opts.Cluster.Username, "route"},
				{"cluster password", opts.Cluster.Password, testRoutePassword},
				{"monitoring host", opts.HTTPHost, "127.0.0.1"},
				{"system account", opts.SystemAccount, "SYS"},
			}
			for _, c := range strs {
				if c.got != c.want {
					t.Errorf("%s = %q, want %q", c.what, c.got, c.want)
				}
			}
			if !opts.JetStream {
				t.Error("JetStream is not enabled")
			}
			if !opts.SyncAlways {
				t.Error("JetStream sync_interval is not always")
			}
			if opts.StoreDir == "" {
				t.Error("JetStream store_dir is empty")
			}
			if other, ok := storeDirs[opts.StoreDir]; ok {
				t.Errorf("store_dir %s is also %s's", opts.StoreDir, other)
			}
			storeDirs[opts.StoreDir] = n.name

			var routes []string
			for _, r := range opts.Routes {
				routes = append(routes, r.Host)
				if user := r.User.Username(); user != "route" {
					t.Errorf("route %s user = %q, want route", r.Host, user)
				}
				if pw, _ := r.User.Password(); pw != testRoutePassword {
					t.Errorf("route %s does not carry the route password", r.Host)
				}
			}
			slices.Sort(routes)
			if !slices.Equal(routes, wantRoutes) {
				t.Errorf("routes = %v, want %v", routes, wantRoutes)
			}
		})
	}
}

// TestNATSExampleSecretsRefuseToStart checks that the unedited templates
// lock everything: the server does not accept the configuration, and every
// password placeholder is taken for a bcrypt hash that matches no password.
func TestNATSExampleSecretsRefuseToStart(t *testing.T) {
	dir := t.TempDir()
	copyDir(t, "nats", dir)
	for _, name := range []string{"user-secrets.conf", "route-secrets.conf"} {
		if err := os.WriteFile(filepath.Join(dir, name), []byte(readExample(t, name)), 0o600); err != nil {
			t.Fatal(err)
		}
	}
	for _, n := range nodes {
		_, err := server.ProcessConfigFile(filepath.Join(dir, n.name+".conf"))
		if err == nil || !strings.Contains(err.Error(), "error parsing route url") {
			t.Errorf("%s.conf with the unedited templates: error %v, want the route URLs refused", n.name, err)
		}
	}

	tree, err := conf.ParseFile(filepath.Join(dir, "user-secrets.conf"))
	if err != nil {
		t.Fatal(err)
	}
	// nats-server takes a password matching ^\$2[abxy]\$\d{2}\$ for a bcrypt
	// hash (server/auth.go, isBcrypt) and compares with
	// bcrypt.CompareHashAndPassword. A malformed hash fails there before the
	// password is looked at (any error but a mismatch), so no password matches.
	bcryptShape := regexp.MustCompile(`^\$2[abxy]\$\d{2}\$`)
	found := 0
	for key, v := range tree {
		if !strings.HasSuffix(key, "_PASSWORD_HASH") {
			continue
		}
		found++
		hash, _ := v.(string)
		if !bcryptShape.MatchString(hash) {
			t.Errorf("%s = %q: not shaped like a bcrypt hash, so the server would take it as a plain password", key, hash)
		}
		for _, password := range []string{"", "password", hash} {
			err := bcrypt.CompareHashAndPassword([]byte(hash), []byte(password))
			if err == nil || errors.Is(err, bcrypt.ErrMismatchedHashAndPassword) {
				t.Errorf("%s = %q with password %q: error %v, want a malformed-hash error", key, hash, password, err)
			}
		}
	}
	if found != len(testPasswords) {
		t.Errorf("user-secrets.conf.example has %d password hashes, want %d", found, len(testPasswords))
	}
}

// fnv1a32 is FNV-1a, 32 bits, computed with the standard library's hash/fnv
// (Fowler, Noll, Vo; offset basis 2166136261, prime 16777619).
func fnv1a32(s string) uint32 {
	h := fnv.New32a()
	h.Write([]byte(s))
	return h.Sum32()
}

// userKey is the subject-safe user key of the subject layout: the lowercase
// hex of xxhash64(user id), 16 characters.
func userKey(user string) string {
	return fmt.Sprintf("%016x", xxhash.Sum64String(user))
}

// TestNATSPartitionMapping checks the account mapping on every node and what
// it does: tl.in.<kind>.<ukey> becomes tl.ev.<p>.<kind>.<ukey> with
// p = FNV-1a-32(ukey) mod 16, the same partition for a user whatever the kind.
func TestNATSPartitionMapping(t *testing.T) {
	dir := natsDir(t)
	for _, n := range nodes {
		tree, err := conf.ParseFile(filepath.Join(dir, n.name+".conf"))
		if err != nil {
			t.Fatal(err)
		}
		accounts, _ := tree["accounts"].(map[string]any)
		account, _ := accounts["TOUCHLEDGER"].(map[string]any)
		mappings, _ := account["mappings"].(map[string]any)
		if got := mappings[mappingSource]; got != mappingDest {
			t.Errorf("%s: account TOUCHLEDGER maps %s to %v, want %s", n.name, mappingSource, got, mappingDest)
		}
		if len(mappings) != 1 {
			t.Errorf("%s: %d mappings, want only %s", n.name, len(mappings), mappingSource)
		}
	}

	transform, err := server.NewSubjectTransform(mappingSource, mappingDest)
	if err != nil {
		t.Fatal(err)
	}

	// The worked example of nats/README.md ("Subjects and the partition
	// mapping"); [computed] with xxhash64 and hash/fnv: FNV-1a-32 of the key
	// is 1080927753, and 1080927753 mod 16 = 9.
	examples := []struct {
		user, ukey, subject string
	}{
		{"shopper-1", "86d32d48dd04ae81", "tl.ev.9.touch.86d32d48dd04ae81"},
	}
	for _, ex := range examples {
		if got := userKey(ex.user); got != ex.ukey {
			t.Errorf("user key of %s = %s, want %s", ex.user, got, ex.ukey)
		}
		got, err := transform.Match("tl.in.touch." + ex.ukey)
		if err != nil || got != ex.subject {
			t.Errorf("tl.in.touch.%s maps to %s (%v), want %s", ex.ukey, got, err, ex.subject)
		}
	}

	seen := map[string]bool{}
	for i := range 1000 {
		key := userKey(fmt.Sprintf("shopper-%d", i))
		p := strconv.Itoa(int(fnv1a32(key) % partitions))
		seen[p] = true
		for _, kind := range []string{"touch", "action"} {
			got, err := transform.Match("tl.in." + kind + "." + key)
			if err != nil {
				t.Fatalf("map tl.in.%s.%s: %v", kind, key, err)
			}
			if want := "tl.ev." + p + "." + kind + "." + key; got != want {
				t.Fatalf("tl.in.%s.%s maps to %s, want %s", kind, key, got, want)
			}
		}
	}
	// 1000 keys miss a given partition with probability (15/16)^1000 < 1e-28.
	if len(seen) != partitions {
		t.Errorf("1000 user keys reached %d partitions, want all %d", len(seen), partitions)
	}
}

// permits reports whether a subject permission allows subject: an allow
// list, when present, must match it, and no deny entry may.
func permits(p *server.SubjectPermission, subject string) bool {
	if p == nil {
		return true
	}
	allowed := p.Allow == nil
	for _, f := range p.Allow {
		if server.SubjectMatchesFilter(subject, f) {
			allowed = true
		}
	}
	for _, f := range p.Deny {
		if server.SubjectMatchesFilter(subject, f) {
			return false
		}
	}
	return allowed
}

// TestNATSPermissions reads each user's parsed permissions and checks what it
// may publish and subscribe to.
func TestNATSPermissions(t *testing.T) {
	opts := loadNode(t, natsDir(t), nodes[0])
	users := map[string]*server.User{}
	for _, u := range opts.Users {
		users[u.Username] = u
	}
	for role := range testPasswords {
		u, ok := users[role]
		if !ok {
			t.Errorf("no user %q", role)
			continue
		}
		wantAccount := map[string]string{
			"publisher": "PUBLISH", "worker": "TOUCHLEDGER", "admin": "TOUCHLEDGER",
			"query": "QUERY", "sys": "SYS",
		}[role]
		if u.Account == nil || u.Account.Name != wantAccount {
			t.Errorf("user %s is not in account %s", role, wantAccount)
		}
		if err := bcrypt.CompareHashAndPassword([]byte(u.Password), []byte(testPasswords[role])); err != nil {
			t.Errorf("user %s: password is not the bcrypt hash from user-secrets.conf: %v", role, err)
		}
	}
	if len(opts.Users) != len(testPasswords) {
		t.Errorf("%d users, want %d", len(opts.Users), len(testPasswords))
	}

	const ukey = "0123456789abcdef"
	tests := []struct {
		user    string
		publish bool // publish, else subscribe
		subject string
		want    bool
	}{
		{"publisher", true, "tl.in.touch." + ukey, true},
		{"publisher", true, "tl.in.action." + ukey, true},
		{"publisher", true, "tl.admin.forget", false},
		{"publisher", true, "tl.admin.x", false},
		{"publisher", true, "tl.ev.3.touch." + ukey, false},
		{"publisher", true, "tl.svc.latest", false},
		{"publisher", true, "tl.dead.decode", false},
		{"publisher", true, "$JS.API.STREAM.CREATE.TL_EVENTS", false},
		{"publisher", true, "$JS.API.STREAM.PURGE.TL_EVENTS", false},
		{"publisher", true, "$JS.API.CONSUMER.CREATE.TL_EVENTS.tl-worker-0-7", false},
		{"publisher", true, "$JS.ACK.TL_EVENTS.tl-worker-0-7.1.1.1.1.0", false},
		{"publisher", false, "_INBOX.abc", true},
		{"publisher", false, "tl.ev.3.touch." + ukey, false},
		{"publisher", false, "tl.in.touch." + ukey, false},
		{"publisher", false, "tl.alert.checkout", false},

		{"worker", true, "$JS.API.STREAM.INFO.TL_EVENTS", true},
		{"worker", true, "$JS.API.CONSUMER.CREATE.TL_EVENTS.tl-worker-0-7", true},
		{"worker", true, "$JS.API.CONSUMER.CREATE.TL_EVENTS.tl-worker-0-7.tl.ev.0.>", true},
		{"worker", true, "$JS.API.CONSUMER.INFO.TL_EVENTS.tl-worker-0-7", true},
		{"worker", true, "$JS.API.CONSUMER.MSG.NEXT.TL_EVENTS.tl-worker-0-7", true},
		{"worker", true, "$JS.ACK.TL_EVENTS.tl-worker-0-7.1.5.5.1700000000000000000.0", true},
		{"worker", true, "$JS.API.STREAM.PURGE.TL_EVENTS", true},
		{"worker", true, "tl.dead.decode", true},
		{"worker", true, "tl.alert.checkout", true},
		{"worker", true, "tl.report.credit", true},
		{"worker", true, "tl.in.touch." + ukey, false},
		{"worker", true, "tl.ev.0.touch." + ukey, false},
		{"worker", true, "tl.admin.forget", false},
		{"worker", true, "tl.svc.latest", false},
		{"worker", true, "$JS.API.STREAM.CREATE.TL_EVENTS", true},
		{"worker", true, "$JS.API.STREAM.UPDATE.TL_EVENTS", true},
		{"worker", true, "$JS.API.STREAM.UPDATE.TL_DEAD", true},
		{"worker", true, "$JS.API.CONSUMER.RESET.TL_EVENTS.tl-worker-0-7", true},
		{"worker", true, "$JS.API.CONSUMER.DELETE.TL_EVENTS.tl-worker-0-7", true},
		{"worker", true, "$JS.API.STREAM.CREATE.OTHER", false},
		{"worker", true, "$JS.API.STREAM.DELETE.TL_EVENTS", false},
		{"worker", true, "$JS.API.STREAM.DELETE.TL_DEAD", false},
		{"worker", true, "$JS.API.STREAM.PURGE.TL_DEAD", false},
		{"worker", true, "$JS.API.STREAM.MSG.DELETE.TL_EVENTS", false},
		{"worker", true, "$JS.API.CONSUMER.CREATE.TL_DEAD.x", false},
		{"worker", false, "_INBOX.abc", true},
		{"worker", false, "tl.svc.latest", true},
		{"worker", false, "$SRV.PING.touchledger", true},
		{"worker", false, "tl.admin.forget", true},
		{"worker", false, "tl.ev.0.touch." + ukey, false},
		{"worker", false, "tl.in.touch." + ukey, false},

		{"query", true, "tl.svc.latest", true},
		{"query", true, "tl.svc.0-7.sum", true},
		{"query", true, "$SRV.PING.touchledger", true},
		{"query", true, "tl.in.touch." + ukey, false},
		{"query", true, "tl.admin.forget", false},
		{"query", true, "tl.alert.checkout", false},
		{"query", true, "$JS.API.STREAM.INFO.TL_EVENTS", false},
		{"query", true, "$JS.API.CONSUMER.CREATE.TL_EVENTS.x", false},
		{"query", false, "_INBOX.abc", true},
		{"query", false, "tl.alert.checkout", true},
		{"query", false, "tl.report.credit", true},
		{"query", false, "tl.ev.0.touch." + ukey, false},
		{"query", false, "tl.svc.latest", false},
		{"query", false, "tl.admin.forget", false},

		{"admin", true, "tl.admin.forget", true},
		{"admin", true, "tl.svc.latest", true},
		{"admin", true, "$JS.API.STREAM.CREATE.TL_EVENTS", true},
		{"admin", true, "$JS.ACK.TL_DEAD.redrive.1.1.1.1.0", true},
		{"admin", true, "tl.in.touch." + ukey, false},
		{"admin", true, "tl.ev.0.touch." + ukey, false},
		{"admin", true, "$JS.ACK.TL_EVENTS.tl-worker-0-7.1.1.1.1.0", false},
		{"admin", false, "_INBOX.abc", true},
		{"admin", false, "tl.alert.checkout", true},
		{"admin", false, "tl.ev.0.touch." + ukey, false},
		{"admin", false, "tl.admin.forget", false},
	}
	for _, tt := range tests {
		u := users[tt.user]
		if u == nil || u.Permissions == nil {
			t.Errorf("user %s has no permissions", tt.user)
			continue
		}
		action, perm := "subscribe", u.Permissions.Subscribe
		if tt.publish {
			action, perm = "publish", u.Permissions.Publish
		}
		if got := permits(perm, tt.subject); got != tt.want {
			t.Errorf("%s may %s %s = %v, want %v", tt.user, action, tt.subject, got, tt.want)
		}
	}
	for role, u := range users {
		if got, want := u.Permissions != nil && u.Permissions.Response != nil, role == "worker"; got != want {
			t.Errorf("%s allow_responses = %v, want %v", role, got, want)
		}
	}
}

// freePorts reserves n loopback ports and releases them for the servers.
func freePorts(t *testing.T, n int) []int {
	t.Helper()
	ports := make([]int, n)
	listeners := make([]net.Listener, n)
	for i := range n {
		l, err := net.Listen("tcp", "127.0.0.1:0")
		if err != nil {
			t.Fatal(err)
		}
		listeners[i] = l
		ports[i] = l.Addr().(*net.TCPAddr).Port
	}
	for _, l := range listeners {
		l.Close()
	}
	return ports
}

// startCluster starts the three nodes from their configuration files with
// the listen addresses moved to free loopback ports, the routes pointed at
// them and the stores in temporary directories. It returns the client URLs.
func startCluster(t *testing.T) string {
	t.Helper()
	dir := natsDir(t)
	ports := freePorts(t, 2*len(nodes))
	clientPorts, clusterPorts := ports[:len(nodes)], ports[len(nodes):]
	hostIndex := map[string]int{}
	for i, n := range nodes {
		hostIndex[n.host] = i
	}
	var urls []string
	for i, n := range nodes {
		opts := loadNode(t, dir, n)
		opts.Host, opts.Port = "127.0.0.1", clientPorts[i]
		opts.HTTPPort = 0
		opts.Cluster.Host, opts.Cluster.Port = "127.0.0.1", clusterPorts[i]
		routes := make([]*url.URL, 0, len(opts.Routes))
		for _, r := range opts.Routes {
			k, ok := hostIndex[r.Hostname()]
			if !ok {
				t.Fatalf("%s: route to unknown host %s", n.name, r.Hostname())
			}
			moved := *r
			moved.Host = net.JoinHostPort("127.0.0.1", strconv.Itoa(clusterPorts[k]))
			routes = append(routes, &moved)
		}
		opts.Routes = routes
		opts.StoreDir = filepath.Join(t.TempDir(), n.name)
		opts.NoLog, opts.NoSigs = true, true
		s, err := server.NewServer(opts)
		if err != nil {
			t.Fatalf("%s: %v", n.name, err)
		}
		s.Start()
		t.Cleanup(func() {
			s.Shutdown()
			s.WaitForShutdown()
		})
		if !s.ReadyForConnections(10 * time.Second) {
			t.Fatalf("%s not ready for connections", n.name)
		}
		urls = append(urls, fmt.Sprintf("nats://127.0.0.1:%d", clientPorts[i]))
	}
	return strings.Join(urls, ",")
}

// client is a connection with one role's credentials; errs
// receives the asynchronous errors the server sends, such as permission
// violations.
type client struct {
	role string
	nc   *nats.Conn
	js   jetstream.JetStream
	errs chan error
}

func connect(t *testing.T, urls, role string) *client {
	t.Helper()
	c := &client{role: role, errs: make(chan error, 64)}
	opts := []nats.Option{
		nats.Name("deploy-test-" + role),
		nats.UserInfo(role, testPasswords[role]),
		nats.ErrorHandler(func(_ *nats.Conn, _ *nats.Subscription, err error) {
			select {
			case c.errs <- err:
			default:
			}
		}),
	}
	nc, err := nats.Connect(urls, opts...)
	if err != nil {
		t.Fatalf("connect as %s: %v", role, err)
	}
	t.Cleanup(nc.Close)
	js, err := jetstream.New(nc)
	if err != nil {
		t.Fatal(err)
	}
	c.nc, c.js = nc, js
	return c
}

// expectViolation waits for the server's permission violation naming what.
func (c *client) expectViolation(t *testing.T, what string) {
	t.Helper()
	if err := c.nc.Flush(); err != nil {
		t.Fatalf("%s: flush: %v", c.role, err)
	}
	select {
	case err := <-c.errs:
		if !errors.Is(err, nats.ErrPermissionViolation) || !strings.Contains(err.Error(), what) {
			t.Errorf("%s: got error %v, want a permissions violation for %s", c.role, err, what)
		}
	case <-time.After(3 * time.Second):
		t.Errorf("%s: no permissions violation for %s", c.role, what)
	}
}

// expectNoErrors checks that no asynchronous error arrived.
func (c *client) expectNoErrors(t *testing.T) {
	t.Helper()
	if err := c.nc.Flush(); err != nil {
		t.Fatalf("%s: flush: %v", c.role, err)
	}
	select {
	case err := <-c.errs:
		t.Errorf("%s: unexpected error %v", c.role, err)
	case <-time.After(100 * time.Millisecond):
	}
}

// TestNATSClusterLive starts the three nodes from the deploy configuration
// on loopback and runs each role through its job and past its limits: a
// worker creates the replicated streams, a publisher's events land in their
// partitions, the worker consumes its partition range, publishes dead
// letters and feeds and, with a second worker, answers a query user's
// discovery request; the admin's request reaches the worker; and every role
// is refused what it must not do.
func TestNATSClusterLive(t *testing.T) {
	if testing.Short() {
		t.Skip("starts a three-node JetStream cluster; skipped with -short")
	}
	urls := startCluster(t)
	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()

	admin := connect(t, urls, "admin")
	worker := connect(t, urls, "worker")

	// The worker creates both streams at start, replicated on all three
	// nodes, and updates them at every later start (ingest's EnsureStream:
	// create-or-update). The cluster elects its JetStream meta leader shortly
	// after the routes connect; until then creation fails, so retry.
	streams := []jetstream.StreamConfig{
		{Name: "TL_EVENTS", Subjects: []string{"tl.ev.>"}, Duplicates: 2 * time.Minute},
		{Name: "TL_DEAD", Subjects: []string{"tl.dead.>"}, Duplicates: 10 * time.Minute},
	}
	for i := range streams {
		streams[i].Storage, streams[i].Replicas, streams[i].MaxAge = jetstream.FileStorage, 3, 30*24*time.Hour
	}
	for {
		attempt, cancelAttempt := context.WithTimeout(ctx, 2*time.Second)
		_, err := worker.js.CreateOrUpdateStream(attempt, streams[0])
		cancelAttempt()
		if err == nil {
			break
		}
		if ctx.Err() != nil {
			t.Fatalf("worker creates TL_EVENTS: %v", err)
		}
		time.Sleep(200 * time.Millisecond)
	}
	for _, sc := range []jetstream.StreamConfig{streams[1], streams[0], streams[1]} {
		if _, err := worker.js.CreateOrUpdateStream(ctx, sc); err != nil {
			t.Fatalf("worker creates or updates %s: %v", sc.Name, err)
		}
	}
	events, err := admin.js.Stream(ctx, "TL_EVENTS")
	if err != nil {
		t.Fatal(err)
	}
	info, err := events.Info(ctx)
	if err != nil {
		t.Fatal(err)
	}
	if info.Cluster == nil || info.Cluster.Leader == "" || len(info.Cluster.Replicas) != 2 {
		t.Errorf("TL_EVENTS cluster info = %+v, want a leader and 2 replicas", info.Cluster)
	}

	// Publisher: 20 shoppers' touches through the mapping, each with its
	// event id as message id; a re-publish is a duplicate.
	publisher := connect(t, urls, "publisher")
	type sent struct {
		key       string
		partition int
		seq       uint64
	}
	var all []sent
	for i := range 20 {
		key := userKey(fmt.Sprintf("shopper-%d", i))
		ack, err := publisher.js.Publish(ctx, "tl.in.touch."+key, []byte(`{}`), jetstream.WithMsgID(fmt.Sprintf("ev-%d", i)))
		if err != nil {
			t.Fatalf("publish as publisher: %v", err)
		}
		if ack.Stream != "TL_EVENTS" || ack.Duplicate {
			t.Errorf("ack = %+v, want a new message in TL_EVENTS", ack)
		}
		all = append(all, sent{key: key, partition: int(fnv1a32(key) % partitions), seq: ack.Sequence})
	}
	again, err := publisher.js.Publish(ctx, "tl.in.touch."+all[0].key, []byte(`{}`), jetstream.WithMsgID("ev-0"))
	if err != nil {
		t.Fatal(err)
	}
	if !again.Duplicate || again.Sequence != all[0].seq {
		t.Errorf("re-publish of ev-0: ack %+v, want a duplicate of sequence %d", again, all[0].seq)
	}
	for _, s := range all {
		msg, err := events.GetMsg(ctx, s.seq)
		if err != nil {
			t.Fatal(err)
		}
		if want := fmt.Sprintf("tl.ev.%d.touch.%s", s.partition, s.key); msg.Subject != want {
			t.Errorf("sequence %d stored as %s, want %s", s.seq, msg.Subject, want)
		}
	}
	publisher.expectNoErrors(t)

	publisher.nc.Publish("tl.admin.x", nil)
	publisher.expectViolation(t, `Publish to "tl.admin.x"`)
	publisher.nc.Publish("tl.ev.0.touch."+all[0].key, nil)
	publisher.expectViolation(t, `Publish to "tl.ev.0.touch.`)
	if _, err := publisher.nc.SubscribeSync("tl.ev.>"); err != nil {
		t.Fatal(err)
	}
	publisher.expectViolation(t, `Subscription to "tl.ev.>"`)
	short, cancelShort := context.WithTimeout(ctx, time.Second)
	_, err = publisher.js.CreateOrUpdateConsumer(short, "TL_EVENTS", jetstream.ConsumerConfig{Durable: "sneak"})
	cancelShort()
	if err == nil {
		t.Error("publisher created a consumer on TL_EVENTS")
	}
	publisher.expectViolation(t, "$JS.API.CONSUMER.")

	// A query user listens on every reply inbox of its account: it must not
	// see the stream messages delivered to the worker's inbox.
	query := connect(t, urls, "query")
	snoop, err := query.nc.SubscribeSync("_INBOX.>")
	if err != nil {
		t.Fatal(err)
	}
	if err := query.nc.Flush(); err != nil {
		t.Fatal(err)
	}

	// Worker for the half of the partitions holding shopper-0: one durable
	// pull consumer filtering its partitions, acknowledge-all.
	first := all[0].partition / 8 * 8
	last := first + 7
	var filters []string
	for p := first; p <= last; p++ {
		filters = append(filters, fmt.Sprintf("tl.ev.%d.>", p))
	}
	consumerName := fmt.Sprintf("tl-worker-%d-%d", first, last)
	consumer, err := worker.js.CreateOrUpdateConsumer(ctx, "TL_EVENTS", jetstream.ConsumerConfig{
		Durable:        consumerName,
		FilterSubjects: filters,
		AckPolicy:      jetstream.AckAllPolicy,
		MaxAckPending:  1 << 20,
	})
	if err != nil {
		t.Fatalf("create consumer as worker: %v", err)
	}
	var want []string
	for _, s := range all {
		if s.partition >= first && s.partition <= last {
			want = append(want, fmt.Sprintf("tl.ev.%d.touch.%s", s.partition, s.key))
		}
	}
	batch, err := consumer.Fetch(len(want), jetstream.FetchMaxWait(5*time.Second))
	if err != nil {
		t.Fatal(err)
	}
	var got []string
	var lastMsg jetstream.Msg
	for msg := range batch.Messages() {
		got = append(got, msg.Subject())
		lastMsg = msg
	}
	if err := batch.Error(); err != nil {
		t.Fatalf("fetch: %v", err)
	}
	if !slices.Equal(got, want) {
		t.Errorf("worker %d-%d fetched %v, want %v (stream order)", first, last, got, want)
	}
	if lastMsg != nil {
		if err := lastMsg.DoubleAck(ctx); err != nil {
			t.Errorf("acknowledge as worker: %v", err)
		}
	}
	// After a restart the worker repositions its consumer at the sequence
	// after its last commit (reset, or delete and create on older servers).
	if _, err := worker.js.ResetConsumerToSequence(ctx, "TL_EVENTS", consumerName, all[0].seq); err != nil {
		t.Errorf("reset consumer as worker: %v", err)
	}
	if msg, err := snoop.NextMsg(300 * time.Millisecond); err == nil {
		t.Errorf("query user received %s on its _INBOX.> subscription while the worker fetched", msg.Subject)
	}
	if err := snoop.Unsubscribe(); err != nil {
		t.Fatal(err)
	}
	dead, err := worker.js.Publish(ctx, "tl.dead.decode", []byte(`{}`), jetstream.WithMsgID("dead-7"))
	if err != nil || dead.Stream != "TL_DEAD" {
		t.Errorf("dead letter as worker: ack %+v, err %v; want stored in TL_DEAD", dead, err)
	}

	// Workers serve queries (NATS micro) and admin requests; query users ask
	// and follow the alert feed. Discovery (tl.svc.latest) has no queue
	// group: every worker answers, and all answers must cross into the QUERY
	// account. A second worker connection stands for the other half.
	halves := []struct {
		c      *client
		ranges string
	}{
		{worker, fmt.Sprintf("%d-%d", first, last)},
		{connect(t, urls, "worker"), fmt.Sprintf("%d-%d", 8-first, 15-first)},
	}
	for _, h := range halves {
		svc, err := micro.AddService(h.c.nc, micro.Config{Name: "touchledger", Version: "1.0.0"})
		if err != nil {
			t.Fatal(err)
		}
		defer svc.Stop()
		body := []byte(`{"partitions":"` + h.ranges + `"}`)
		if err := svc.AddEndpoint("latest", micro.HandlerFunc(func(r micro.Request) { r.Respond(body) }),
			micro.WithEndpointSubject("tl.svc.latest"), micro.WithEndpointQueueGroupDisabled()); err != nil {
			t.Fatal(err)
		}
		if err := svc.AddEndpoint("sum", micro.HandlerFunc(func(r micro.Request) { r.Respond(body) }),
			micro.WithEndpointSubject("tl.svc."+h.ranges+".sum")); err != nil {
			t.Fatal(err)
		}
		h.c.expectNoErrors(t)
	}
	inbox := query.nc.NewInbox()
	answers, err := query.nc.SubscribeSync(inbox)
	if err != nil {
		t.Fatal(err)
	}
	if err := query.nc.PublishRequest("tl.svc.latest", inbox, nil); err != nil {
		t.Fatal(err)
	}
	var discovered []string
	for range halves {
		msg, err := answers.NextMsg(3 * time.Second)
		if err != nil {
			t.Errorf("query user: discovery answers %v, then %v; want one per worker", discovered, err)
			break
		}
		discovered = append(discovered, string(msg.Data))
	}
	slices.Sort(discovered)
	wantDiscovered := []string{`{"partitions":"0-7"}`, `{"partitions":"8-15"}`}
	if !slices.Equal(discovered, wantDiscovered) {
		t.Errorf("query user: discovery answers %v, want %v", discovered, wantDiscovered)
	}
	forget, err := worker.nc.Subscribe("tl.admin.forget", func(m *nats.Msg) { m.Respond([]byte("forgotten")) })
	if err != nil {
		t.Fatal(err)
	}
	defer forget.Unsubscribe()
	worker.expectNoErrors(t)

	feed, err := query.nc.SubscribeSync("tl.alert.>")
	if err != nil {
		t.Fatal(err)
	}
	if err := query.nc.Flush(); err != nil {
		t.Fatal(err)
	}
	requests := []struct {
		who     *client
		subject string
		want    string
	}{
		{query, fmt.Sprintf("tl.svc.%d-%d.sum", first, last), fmt.Sprintf(`{"partitions":"%d-%d"}`, first, last)},
		{query, "$SRV.PING.touchledger", `"name":"touchledger"`},
		{admin, "tl.admin.forget", "forgotten"},
	}
	for _, r := range requests {
		reply, err := r.who.nc.Request(r.subject, nil, 3*time.Second)
		if err != nil {
			t.Errorf("%s request %s: %v", r.who.role, r.subject, err)
			continue
		}
		if !bytes.Contains(reply.Data, []byte(r.want)) {
			t.Errorf("%s request %s: reply %s, want it to contain %s", r.who.role, r.subject, reply.Data, r.want)
		}
	}
	if err := worker.nc.Publish("tl.alert.checkout", []byte(`{"event":"opened"}`)); err != nil {
		t.Fatal(err)
	}
	if msg, err := feed.NextMsg(3 * time.Second); err != nil || msg.Subject != "tl.alert.checkout" {
		t.Errorf("query user on the alert feed: %v, %v; want tl.alert.checkout", msg, err)
	}
	query.expectNoErrors(t)
	worker.expectNoErrors(t)
	admin.expectNoErrors(t)

	// What the worker and the query user must not do.
	worker.nc.Publish("tl.admin.x", nil)
	worker.expectViolation(t, `Publish to "tl.admin.x"`)
	// In its own account the mapping applies before the permission check, so
	// the worker's attempt to inject an event is refused as tl.ev.<p>.…
	worker.nc.Publish("tl.in.touch."+all[0].key, nil)
	worker.expectViolation(t, fmt.Sprintf(`Publish to "tl.ev.%d.touch.%s"`, all[0].partition, all[0].key))
	short, cancelShort = context.WithTimeout(ctx, time.Second)
	err = worker.js.DeleteStream(short, "TL_EVENTS")
	cancelShort()
	if err == nil {
		t.Error("worker deleted TL_EVENTS")
	}
	worker.expectViolation(t, "$JS.API.STREAM.DELETE.TL_EVENTS")

	query.nc.Publish("tl.in.touch."+all[0].key, nil)
	query.expectViolation(t, `Publish to "tl.in.touch.`)
	query.nc.Publish("tl.admin.forget", nil)
	query.expectViolation(t, `Publish to "tl.admin.forget"`)
	if _, err := query.nc.SubscribeSync("tl.ev.>"); err != nil {
		t.Fatal(err)
	}
	query.expectViolation(t, `Subscription to "tl.ev.>"`)
	short, cancelShort = context.WithTimeout(ctx, time.Second)
	_, err = query.js.CreateOrUpdateConsumer(short, "TL_EVENTS", jetstream.ConsumerConfig{Durable: "sneak"})
	cancelShort()
	if err == nil {
		t.Error("query user created a consumer on TL_EVENTS")
	}
	query.expectViolation(t, "$JS.API.CONSUMER.")

	// A worker whose range changes removes its old consumer.
	if err := worker.js.DeleteConsumer(ctx, "TL_EVENTS", consumerName); err != nil {
		t.Errorf("delete consumer as worker: %v", err)
	}
	worker.expectNoErrors(t)
}

// promtool returns the path of Debian's promtool (package prometheus). CI
// (.ci/run) installs it and sets CI, so there its absence is a failure.
func promtool(t *testing.T) string {
	t.Helper()
	path, err := exec.LookPath("promtool")
	if err != nil {
		if os.Getenv("CI") != "" {
			t.Fatal("promtool not on PATH; .ci/run installs Debian's prometheus package")
		}
		t.Skip("promtool not on PATH (Debian package prometheus); CI installs it")
	}
	return path
}

// prometheusDir is a temporary copy of prometheus/ with the bearer token file
// prometheus.yml names, as an installation would have.
func prometheusDir(t *testing.T) string {
	t.Helper()
	dir := t.TempDir()
	copyDir(t, "prometheus", dir)
	if err := os.WriteFile(filepath.Join(dir, "touchledger-worker.token"), []byte("deploy-test-token\n"), 0o600); err != nil {
		t.Fatal(err)
	}
	return dir
}

// TestPromtool runs promtool's checks and the rule unit tests of
// rules_test.yml on a copy of prometheus/.
func TestPromtool(t *testing.T) {
	bin := promtool(t)
	dir := prometheusDir(t)
	for _, args := range [][]string{
		{"check", "config", "prometheus.yml"},
		{"check", "rules", "rules.yml"},
		{"test", "rules", "rules_test.yml"},
	} {
		t.Run(strings.Join(args, "_"), func(t *testing.T) {
			cmd := exec.Command(bin, args...)
			cmd.Dir = dir
			out, err := cmd.CombinedOutput()
			if err != nil {
				t.Errorf("promtool %s: %v\n%s", strings.Join(args, " "), err, out)
			}
		})
	}
}

// TestPrometheusMatchesDeployment checks that the scrape job, the rules and
// the worker unit agree: the job name the rules select, the worker port, and
// that every rule file the configuration names exists.
func TestPrometheusMatchesDeployment(t *testing.T) {
	var cfg struct {
		RuleFiles     []string `yaml:"rule_files"`
		ScrapeConfigs []struct {
			JobName       string `yaml:"job_name"`
			StaticConfigs []struct {
				Targets []string          `yaml:"targets"`
				Labels  map[string]string `yaml:"labels"`
			} `yaml:"static_configs"`
		} `yaml:"scrape_configs"`
	}
	data, err := os.ReadFile(filepath.Join("prometheus", "prometheus.yml"))
	if err != nil {
		t.Fatal(err)
	}
	if err := yaml.Unmarshal(data, &cfg); err != nil {
		t.Fatal(err)
	}
	if len(cfg.ScrapeConfigs) != 1 || cfg.ScrapeConfigs[0].JobName != "touchledger-worker" {
		t.Fatalf("scrape configs = %+v, want the one job touchledger-worker", cfg.ScrapeConfigs)
	}
	for _, f := range cfg.RuleFiles {
		if _, err := os.Stat(filepath.Join("prometheus", f)); err != nil {
			t.Errorf("rule file %s: %v", f, err)
		}
	}
	rules, err := os.ReadFile(filepath.Join("prometheus", "rules.yml"))
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.Contains(rules, []byte(`up{job="touchledger-worker"}`)) {
		t.Error(`rules.yml does not select up{job="touchledger-worker"}, the scrape job of prometheus.yml`)
	}
	unit, err := os.ReadFile(filepath.Join("systemd", "touchledger-worker@.service"))
	if err != nil {
		t.Fatal(err)
	}
	addr := regexp.MustCompile(`(?m)^Environment=TL_HTTP_ADDR=(\S+)$`).FindSubmatch(unit)
	if addr == nil {
		t.Fatal("the unit sets no default TL_HTTP_ADDR")
	}
	_, port, err := net.SplitHostPort(string(addr[1]))
	if err != nil {
		t.Fatal(err)
	}
	for _, sc := range cfg.ScrapeConfigs[0].StaticConfigs {
		if sc.Labels["partitions"] == "" {
			t.Errorf("static targets %v carry no partitions label", sc.Targets)
		}
		for _, target := range sc.Targets {
			if _, p, err := net.SplitHostPort(target); err != nil || p != port {
				t.Errorf("target %s: want port %s, the unit's default", target, port)
			}
		}
	}
	var sd []struct {
		Targets []string          `yaml:"targets"`
		Labels  map[string]string `yaml:"labels"`
	}
	data, err = os.ReadFile(filepath.Join("prometheus", "targets", "workers.yml.example"))
	if err != nil {
		t.Fatal(err)
	}
	if err := yaml.Unmarshal(data, &sd); err != nil {
		t.Fatalf("targets/workers.yml.example: %v", err)
	}
	if len(sd) == 0 {
		t.Error("targets/workers.yml.example lists no target")
	}
	for _, g := range sd {
		if len(g.Targets) == 0 || g.Labels["partitions"] == "" {
			t.Errorf("targets/workers.yml.example entry %+v: want targets and a partitions label", g)
		}
	}
}

// TestWorkerUnit checks the systemd unit's settings the deployment relies on
// and, where systemd-analyze exists, that systemd accepts every line.
func TestWorkerUnit(t *testing.T) {
	path := filepath.Join("systemd", "touchledger-worker@.service")
	data, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	settings := map[string][]string{}
	for _, line := range strings.Split(string(data), "\n") {
		key, value, ok := strings.Cut(line, "=")
		if !ok || strings.HasPrefix(line, "#") {
			continue
		}
		settings[key] = append(settings[key], value)
	}
	tests := []struct {
		key, want string
	}{
		{"User", "touchledger"},
		{"KillSignal", "SIGTERM"},
		{"Restart", "on-failure"},
		{"NoNewPrivileges", "yes"},
		{"ProtectSystem", "strict"},
		{"PrivateTmp", "yes"},
		{"ReadWritePaths", "/var/lib/touchledger/%i"},
		{"EnvironmentFile", "/etc/touchledger/worker.env"},
	}
	for _, tt := range tests {
		if !slices.Contains(settings[tt.key], tt.want) {
			t.Errorf("%s = %v, want %s", tt.key, settings[tt.key], tt.want)
		}
	}
	execStart := strings.Join(settings["ExecStart"], " ")
	for _, want := range []string{"--data /var/lib/touchledger/%i", "--partitions %i", "--nats ", "--nats-user ", "--replicas 3", "--http "} {
		if !strings.Contains(execStart, want) {
			t.Errorf("ExecStart %q lacks %q", execStart, want)
		}
	}
	if strings.Contains(execStart, "PASSWORD") {
		t.Errorf("ExecStart %q puts a password on the command line", execStart)
	}
	if len(settings["LimitNOFILE"]) == 0 {
		t.Error("no LimitNOFILE")
	}
	stop, err := time.ParseDuration(strings.Join(settings["TimeoutStopSec"], "") + "s")
	if err != nil {
		t.Fatalf("TimeoutStopSec: %v", err)
	}
	// A final commit plus closing Badger (a memtable flush): a minute at
	// least on a slow disk (rule of thumb).
	if stop < time.Minute {
		t.Errorf("TimeoutStopSec = %s, want at least 1m for the final commit", stop)
	}

	analyze, err := exec.LookPath("systemd-analyze")
	if err != nil {
		t.Skip("systemd-analyze not on PATH")
	}
	// systemd-analyze verify needs an existing binary; the instance 0-7
	// stands for any partition range.
	dir := t.TempDir()
	instance := filepath.Join(dir, "touchledger-worker@0-7.service")
	if err := os.WriteFile(instance, bytes.ReplaceAll(data, []byte("/usr/local/bin/ingest"), []byte("/bin/true")), 0o644); err != nil {
		t.Fatal(err)
	}
	out, err := exec.Command(analyze, "verify", instance).CombinedOutput()
	if err != nil || len(bytes.TrimSpace(out)) > 0 {
		t.Errorf("systemd-analyze verify: %v\n%s", err, out)
	}
}
