package cli

import (
	"flag"
	"fmt"
	"os"
	"runtime/debug"
	"time"

	"github.com/touchledger/touchledger/internal/config"
	"github.com/touchledger/touchledger/internal/stream"
)

// Exit codes of every command.
const (
	ExitOK      = 0 // done
	ExitFailure = 1 // the work failed: data, I/O, network
	ExitUsage   = 2 // called wrongly: unknown or inapplicable flag, bad value
)

// Duration is a flag.Value reading config.ParseDuration's syntax, the one
// every duration takes (flags, configuration, HTTP parameters): 30m, 12h,
// 7d, 1d12h.
type Duration struct{ D *time.Duration }

// DurationVar defines a duration flag with that syntax.
func DurationVar(fs *flag.FlagSet, p *time.Duration, name string, value time.Duration, usage string) {
	*p = value
	fs.Var(Duration{p}, name, usage)
}

func (d Duration) String() string {
	if d.D == nil {
		return ""
	}
	return config.Duration(*d.D).String()
}

// Set implements flag.Value.
func (d Duration) Set(s string) error {
	v, err := config.ParseDuration(s)
	if err != nil {
		return err
	}
	*d.D = v
	return nil
}

// AddVersion registers --version on fs; when it is set after parsing, the
// command prints Version(cmd) and exits 0.
func AddVersion(fs *flag.FlagSet) *bool {
	return fs.Bool("version", false, "print the version (module version and VCS revision) and exit")
}

// Build reads the module version, VCS revision (with "-modified" when the
// working tree had changes) and Go version from the build information.
func Build() (version, revision, goVersion string) {
	info, ok := debug.ReadBuildInfo()
	if !ok {
		return "", "", ""
	}
	modified := false
	for _, s := range info.Settings {
		switch s.Key {
		case "vcs.revision":
			revision = s.Value
		case "vcs.modified":
			modified = s.Value == "true"
		}
	}
	if modified && revision != "" {
		revision += "-modified"
	}
	return info.Main.Version, revision, info.GoVersion
}

// Version is the version line of a command: its module version and VCS
// revision from the build information, e.g. "query v0.3.1 (rev 1a2b3c4,
// modified)"; "(devel)" when built from a working tree without a version.
func Version(cmd string) string {
	info, ok := debug.ReadBuildInfo()
	if !ok {
		return cmd + " (no build information)"
	}
	v := info.Main.Version
	if v == "" {
		v = "(devel)"
	}
	var rev, modified string
	for _, s := range info.Settings {
		switch s.Key {
		case "vcs.revision":
			rev = s.Value
		case "vcs.modified":
			if s.Value == "true" {
				modified = ", modified"
			}
		}
	}
	if len(rev) > 12 {
		rev = rev[:12]
	}
	if rev == "" {
		return fmt.Sprintf("%s %s %s", cmd, v, info.GoVersion)
	}
	return fmt.Sprintf("%s %s (rev %s%s) %s", cmd, v, rev, modified, info.GoVersion)
}

// NATS holds the flags for reaching an existing NATS server or cluster;
// query and ingest register the same set.
type NATS struct {
	url, user, password, token, nkey, creds, ca, cert, key, authFile string
}

// AddNATS registers --nats (default: $NATS_URL, else defaultURL) and the
// authentication and TLS flags on fs.
func AddNATS(fs *flag.FlagSet, defaultURL, urlHelp string) *NATS {
	f := &NATS{}
	if env := os.Getenv("NATS_URL"); env != "" {
		defaultURL = env
	}
	fs.StringVar(&f.url, "nats", defaultURL, urlHelp+" (default $NATS_URL)")
	fs.StringVar(&f.user, "nats-user", "", "NATS `user` (with --nats-password)")
	fs.StringVar(&f.password, "nats-password", "", "NATS `password` (default $TL_NATS_PASSWORD)")
	fs.StringVar(&f.token, "nats-token", "", "NATS `token` (default $TL_NATS_TOKEN)")
	fs.StringVar(&f.nkey, "nats-nkey", "", "NKey seed `file`")
	fs.StringVar(&f.creds, "nats-creds", "", "credentials `file` (user JWT and seed)")
	fs.StringVar(&f.ca, "nats-ca", "", "TLS: CA certificates `file` to trust")
	fs.StringVar(&f.cert, "nats-cert", "", "TLS: client certificate `file` (with --nats-key)")
	fs.StringVar(&f.key, "nats-key", "", "TLS: client key `file`")
	fs.StringVar(&f.authFile, "nats-auth-file", "", "`file` with user:password (mode 600), e.g. DIR/nats-publisher.auth of a worker started with --local-auth")
	return f
}

// URL returns the server URLs given (or from $NATS_URL); empty: none.
func (f *NATS) URL() string { return f.url }

// Options returns the connection options; secrets not given as flags come
// from --nats-auth-file or the environment (so they need not appear in the
// process list).
func (f *NATS) Options(name string) (stream.ConnectOptions, error) {
	user, pw, tok := f.user, f.password, f.token
	if f.authFile != "" {
		c, err := stream.ReadAuthFile(f.authFile)
		if err != nil {
			return stream.ConnectOptions{}, err
		}
		user, pw = c.User, c.Password
	}
	if pw == "" {
		pw = os.Getenv("TL_NATS_PASSWORD")
	}
	if tok == "" {
		tok = os.Getenv("TL_NATS_TOKEN")
	}
	return stream.ConnectOptions{URL: f.url, Name: name, User: user, Password: pw, Token: tok,
		NKeyFile: f.nkey, CredsFile: f.creds, CAFile: f.ca, CertFile: f.cert, KeyFile: f.key}, nil
}
