package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"net/http"
	"os"
	"path/filepath"
	"time"

	"github.com/touchledger/touchledger/internal/cli"
	"github.com/touchledger/touchledger/internal/config"
	"github.com/touchledger/touchledger/internal/pipeline"
	"github.com/touchledger/touchledger/internal/state"
)

const backupUsage = `ingest backup: take a point-in-time copy of a worker's store.

Usage:
  ingest backup --from http://127.0.0.1:9464 --out FILE [--token-file F]   a running worker
  ingest backup --data DIR --out FILE [--config F]                         a stopped worker's directory

The copy is taken from one read transaction, so state, counters and input
positions match even while the worker keeps committing. Restore it with
"ingest restore"; a worker started on the restored directory resumes from the
copy's committed positions and catches up from the bus.

Options:
`

const restoreUsage = `ingest restore: rebuild a data directory from a backup.

Usage:
  ingest restore --in FILE --data DIR [--config F]

DIR must not exist or be empty. The backup is verified (entry count and
checksum) while it is written to a temporary directory, which is renamed to
DIR only when everything checked out.

Options:
`

// runBackup implements "ingest backup".
func runBackup(args []string, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("ingest backup", flag.ContinueOnError)
	fs.SetOutput(stderr)
	from := fs.String("from", "", "base `URL` of a running worker's HTTP server")
	tokenFile := fs.String("token-file", "", "`file` holding the worker's HTTP token (or $TL_HTTP_TOKEN)")
	dir := fs.String("data", "", "data `directory` of a stopped worker")
	out := fs.String("out", "", "backup `file` to write")
	cfgPath := fs.String("config", "", "configuration `file` the directory was written with")
	version := cli.AddVersion(fs)
	fs.Usage = func() { fmt.Fprint(stderr, backupUsage); fs.PrintDefaults() }
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return 0
		}
		return 2
	}
	if *version {
		fmt.Fprintln(stdout, cli.Version("ingest backup"))
		return 0
	}
	if *out == "" || (*from == "") == (*dir == "") {
		fmt.Fprintln(stderr, "ingest backup: --out and exactly one of --from or --data are required (see --help)")
		return 2
	}
	tmp := *out + ".partial"
	f, err := os.OpenFile(tmp, os.O_CREATE|os.O_TRUNC|os.O_WRONLY, 0o600)
	if err != nil {
		fmt.Fprintf(stderr, "ingest backup: %v\n", err)
		return 1
	}
	n, err := func() (int64, error) {
		defer f.Close()
		if *from != "" {
			return backupFromWorker(*from, *tokenFile, f)
		}
		cfg, err := loadConfig(*cfgPath)
		if err != nil {
			return 0, err
		}
		st, err := state.Open(context.Background(), pipeline.StoreOptions(*dir, cfg))
		if err != nil {
			return 0, err
		}
		defer st.Close()
		cw := &countWriter{w: f}
		_, err = st.Backup(cw)
		if err == nil {
			err = f.Sync()
		}
		return cw.n, err
	}()
	if err == nil {
		err = os.Rename(tmp, *out)
	}
	if err != nil {
		os.Remove(tmp)
		fmt.Fprintf(stderr, "ingest backup: %v\n", err)
		return 1
	}
	fmt.Fprintf(stdout, "backup written to %s (%d bytes)\n", *out, n)
	return 0
}

func backupFromWorker(base, tokenFile string, w io.Writer) (int64, error) {
	token := os.Getenv("TL_HTTP_TOKEN")
	if tokenFile != "" {
		b, err := os.ReadFile(tokenFile)
		if err != nil {
			return 0, err
		}
		token = string(trimSpace(b))
	}
	req, err := http.NewRequest(http.MethodGet, base+"/admin/backup", nil)
	if err != nil {
		return 0, err
	}
	if token != "" {
		req.Header.Set("Authorization", "Bearer "+token)
	}
	resp, err := (&http.Client{Timeout: 0}).Do(req)
	if err != nil {
		return 0, fmt.Errorf("ask the worker: %w", err)
	}
	defer resp.Body.Close()
	if resp.StatusCode != http.StatusOK {
		b, _ := io.ReadAll(io.LimitReader(resp.Body, 512))
		return 0, fmt.Errorf("worker answered %s: %s", resp.Status, trimSpace(b))
	}
	return io.Copy(w, resp.Body)
}

func trimSpace(b []byte) []byte {
	for len(b) > 0 && (b[len(b)-1] == '\n' || b[len(b)-1] == '\r' || b[len(b)-1] == ' ') {
		b = b[:len(b)-1]
	}
	return b
}

type countWriter struct {
	w io.Writer
	n int64
}

func (c *countWriter) Write(p []byte) (int, error) {
	n, err := c.w.Write(p)
	c.n += int64(n)
	return n, err
}

// runRestore implements "ingest restore".
func runRestore(args []string, stdout, stderr io.Writer) int {
	fs := flag.NewFlagSet("ingest restore", flag.ContinueOnError)
	fs.SetOutput(stderr)
	in := fs.String("in", "", "backup `file` to read")
	dir := fs.String("data", "", "data `directory` to create")
	cfgPath := fs.String("config", "", "configuration `file` of the worker that will use it")
	version := cli.AddVersion(fs)
	fs.Usage = func() { fmt.Fprint(stderr, restoreUsage); fs.PrintDefaults() }
	if err := fs.Parse(args); err != nil {
		if errors.Is(err, flag.ErrHelp) {
			return 0
		}
		return 2
	}
	if *version {
		fmt.Fprintln(stdout, cli.Version("ingest restore"))
		return 0
	}
	if *in == "" || *dir == "" {
		fmt.Fprintln(stderr, "ingest restore: --in and --data are required (see --help)")
		return 2
	}
	cfg, err := loadConfig(*cfgPath)
	if err != nil {
		fmt.Fprintf(stderr, "ingest restore: %v\n", err)
		return 2
	}
	f, err := os.Open(*in)
	if err != nil {
		fmt.Fprintf(stderr, "ingest restore: %v\n", err)
		return 1
	}
	defer f.Close()
	abs, _ := filepath.Abs(*dir)
	start := time.Now()
	n, err := state.Restore(f, abs, pipeline.StoreOptions(abs, cfg))
	if err != nil {
		fmt.Fprintf(stderr, "ingest restore: %v\n", err)
		return 1
	}
	fmt.Fprintf(stdout, "restored %d entries into %s (%.1fs)\n", n, *dir, time.Since(start).Seconds())
	return 0
}

func loadConfig(path string) (config.Config, error) {
	if path == "" {
		return config.Default(), nil
	}
	return config.Load(path)
}
