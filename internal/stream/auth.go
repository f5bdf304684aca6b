package stream

import (
	"crypto/rand"
	"crypto/subtle"
	"encoding/hex"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"sync"

	"github.com/nats-io/nats-server/v2/server"
)

// Credential is a user name and password for the embedded server.
type Credential struct{ User, Password string }

// LocalAuth are the embedded server's generated credentials: the worker's
// (every permission) and the publishers' (publish <prefix>.in.> only,
// receive their acknowledgements).
type LocalAuth struct {
	Worker, Publisher Credential
	// WorkerFile and PublisherFile are where they are kept (mode 600), for
	// the local commands' --nats-auth-file.
	WorkerFile, PublisherFile string
}

// LoadOrCreateLocalAuth reads the credentials kept in dir, creating them
// (random 32-byte passwords, files mode 600) on first use.
func LoadOrCreateLocalAuth(dir string) (LocalAuth, error) {
	a := LocalAuth{WorkerFile: filepath.Join(dir, "nats-worker.auth"), PublisherFile: filepath.Join(dir, "nats-publisher.auth")}
	var err error
	if a.Worker, err = loadOrCreate(a.WorkerFile, "worker"); err != nil {
		return a, err
	}
	if a.Publisher, err = loadOrCreate(a.PublisherFile, "publisher"); err != nil {
		return a, err
	}
	return a, nil
}

func loadOrCreate(path, user string) (Credential, error) {
	if c, err := ReadAuthFile(path); err == nil {
		return c, nil
	} else if !errors.Is(err, os.ErrNotExist) {
		return Credential{}, err
	}
	var b [32]byte
	if _, err := rand.Read(b[:]); err != nil {
		return Credential{}, fmt.Errorf("nats credentials: %w", err)
	}
	c := Credential{User: user, Password: hex.EncodeToString(b[:])}
	if err := os.WriteFile(path, []byte(c.User+":"+c.Password+"\n"), 0o600); err != nil {
		return Credential{}, fmt.Errorf("nats credentials: %w", err)
	}
	return c, nil
}

// ReadAuthFile reads a "user:password" file, which must be readable by
// its owner only.
func ReadAuthFile(path string) (Credential, error) {
	st, err := os.Stat(path)
	if err != nil {
		return Credential{}, fmt.Errorf("nats credentials: %w", err)
	}
	if st.Mode().Perm()&0o077 != 0 {
		return Credential{}, fmt.Errorf("nats credentials %s are accessible to group or others (mode %v); chmod 600 it", path, st.Mode().Perm())
	}
	b, err := os.ReadFile(path)
	if err != nil {
		return Credential{}, fmt.Errorf("nats credentials: %w", err)
	}
	u, p, ok := strings.Cut(strings.TrimSpace(string(b)), ":")
	if !ok || u == "" || p == "" {
		return Credential{}, fmt.Errorf("nats credentials %s: want one line user:password", path)
	}
	return Credential{User: u, Password: p}, nil
}

// EmbedAuth makes the embedded server require a's credentials: the
// worker may do anything, publishers may only publish input subjects
// (<prefix>.in.>) and receive their acknowledgements. The server checks
// publish permissions after the partition mapping, so publishers live in
// an account of their own that reaches the input subjects through a
// service import (as deploy/nats/accounts.conf does): there a publish is
// checked as <prefix>.in.…, and <prefix>.ev.… or admin subjects are
// refused.
func EmbedAuth(a LocalAuth) EmbedOption {
	return func(o *embedOptions) { o.auth = &a }
}

// localAuth is the embedded server's authenticator (Options.
// CustomClientAuthentication): it compares the password in constant time
// and places the client in its account with its permissions.
type localAuth struct {
	a      LocalAuth
	prefix string
	mu     sync.Mutex
	worker *server.Account // the global account: streams, mapping
	pub    *server.Account // publishers' account, importing <prefix>.in.>
}

func (l *localAuth) Check(c server.ClientAuthentication) bool {
	o := c.GetOpts()
	l.mu.Lock()
	worker, pub := l.worker, l.pub
	l.mu.Unlock()
	match := func(cr Credential) bool {
		return subtle.ConstantTimeCompare([]byte(o.Username), []byte(cr.User)) == 1 &&
			subtle.ConstantTimeCompare([]byte(o.Password), []byte(cr.Password)) == 1
	}
	switch {
	case worker == nil || pub == nil:
		return false // not set up yet
	case match(l.a.Worker):
		c.RegisterUser(&server.User{Username: o.Username, Account: worker})
		return true
	case match(l.a.Publisher):
		c.RegisterUser(&server.User{Username: o.Username, Account: pub, Permissions: &server.Permissions{
			Publish:   &server.SubjectPermission{Allow: []string{l.prefix + ".in.>"}},
			Subscribe: &server.SubjectPermission{Allow: []string{"_INBOX.>"}},
		}})
		return true
	}
	return false
}

// setup creates the publishers' account and the import, once the server
// runs (JetStream is then enabled on the global account alone).
func (l *localAuth) setup(s *server.Server) error {
	pub, err := s.RegisterAccount("PUBLISH")
	if err != nil {
		return fmt.Errorf("embedded nats: publishers' account: %w", err)
	}
	g := s.GlobalAccount()
	in := l.prefix + ".in.>"
	if err := g.AddServiceExport(in, []*server.Account{pub}); err != nil {
		return fmt.Errorf("embedded nats: export %s: %w", in, err)
	}
	if err := pub.AddServiceImport(g, in, in); err != nil {
		return fmt.Errorf("embedded nats: import %s: %w", in, err)
	}
	l.mu.Lock()
	l.worker, l.pub = g, pub
	l.mu.Unlock()
	return nil
}

// LoadOrCreateToken reads a bearer token kept in path, creating a random
// one (file mode 600) on first use.
func LoadOrCreateToken(path string) (string, error) {
	if b, err := os.ReadFile(path); err == nil {
		if t := strings.TrimSpace(string(b)); t != "" {
			return t, nil
		}
	} else if !errors.Is(err, os.ErrNotExist) {
		return "", fmt.Errorf("token: %w", err)
	}
	var b [32]byte
	if _, err := rand.Read(b[:]); err != nil {
		return "", fmt.Errorf("token: %w", err)
	}
	t := hex.EncodeToString(b[:])
	if err := os.WriteFile(path, []byte(t+"\n"), 0o600); err != nil {
		return "", fmt.Errorf("token: %w", err)
	}
	return t, nil
}
