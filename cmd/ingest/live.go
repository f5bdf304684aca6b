package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"log/slog"
	"math"
	"net/http"
	"os"
	"path/filepath"
	"time"

	"github.com/nats-io/nats-server/v2/server"
	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/jetstream"
	"github.com/prometheus/client_golang/prometheus"
	"github.com/prometheus/client_golang/prometheus/collectors"

	"github.com/touchledger/touchledger/internal/cli"
	"github.com/touchledger/touchledger/internal/config"
	"github.com/touchledger/touchledger/internal/dashboard"
	"github.com/touchledger/touchledger/internal/feed"
	"github.com/touchledger/touchledger/internal/metrics"
	"github.com/touchledger/touchledger/internal/pipeline"
	"github.com/touchledger/touchledger/internal/query"
	"github.com/touchledger/touchledger/internal/remote"
	"github.com/touchledger/touchledger/internal/state"
	"github.com/touchledger/touchledger/internal/stream"
	"github.com/touchledger/touchledger/internal/web"
)

// liveFlags are the options of live mode.
type liveFlags struct {
	nats         *cli.NATS
	port         int
	partitions   string
	scfg         stream.Config
	httpAddr     string
	httpToken    string
	truthFile    string
	localAuth    bool
	logFormat    string
	shutdownWait time.Duration
	// Feeds on NATS (internal/feed).
	reportInterval time.Duration
	maintenance    time.Duration
	reportWindow   time.Duration
}

func addLiveFlags(fs *flag.FlagSet, l *liveFlags) {
	l.scfg = stream.DefaultConfig()
	l.nats = cli.AddNATS(fs, "", "NATS server `url`s (comma-separated) to consume from; default: start an embedded server")
	fs.IntVar(&l.port, "port", stream.DefaultPort, "embedded server's client `port` on 127.0.0.1 (0 = any free port)")
	fs.StringVar(&l.partitions, "partitions", "", "partition `range` this worker owns, e.g. 0-7 (default: all)")
	fs.IntVar(&l.scfg.Partitions, "partition-count", l.scfg.Partitions, "`number` of partitions of the subject mapping")
	fs.StringVar(&l.scfg.Prefix, "prefix", l.scfg.Prefix, "subject `prefix`")
	fs.StringVar(&l.scfg.Stream, "stream", l.scfg.Stream, "events stream `name`")
	fs.StringVar(&l.scfg.DeadStream, "dead-stream", l.scfg.DeadStream, "dead-letter stream `name`")
	fs.IntVar(&l.scfg.Replicas, "replicas", l.scfg.Replicas, "stream `replicas` (3 on a three-node cluster)")
	cli.DurationVar(fs, &l.scfg.MaxAge, "max-age", l.scfg.MaxAge, "how long the streams keep messages")
	cli.DurationVar(fs, &l.scfg.Duplicates, "dedup-window", l.scfg.Duplicates, "the events stream's de-duplication window for message ids")
	cli.DurationVar(fs, &l.scfg.QuietAfter, "quiet-after", l.scfg.QuietAfter, "event time follows the wall clock once no message arrived for this long")
	cli.DurationVar(fs, &l.scfg.WatchdogTimeout, "watchdog", l.scfg.WatchdogTimeout, "flag the consumer stalled after this long without deliveries while messages are pending")
	fs.StringVar(&l.httpAddr, "http", web.DefaultAddr, "`address` for /metrics, /healthz, /readyz and /api/ (\"off\" disables; port 0 = any free port)")
	fs.StringVar(&l.httpToken, "http-token", "", "bearer `token` required on HTTP (default $TL_HTTP_TOKEN; needed to listen beyond loopback)")
	fs.StringVar(&l.truthFile, "truth", "", "a simulated world's truth `file` (demo --truth): the dashboard draws each channel's true share beside the models")
	fs.BoolVar(&l.localAuth, "local-auth", false, "the embedded server requires credentials, generated into DIR/nats-worker.auth and DIR/nats-publisher.auth (mode 600; publishers may only publish tl.in.>); default: open to every local process, like NATS itself")
	fs.StringVar(&l.logFormat, "log-format", "text", "log `format` on standard error: text or json")
	cli.DurationVar(fs, &l.shutdownWait, "shutdown-timeout", 10*time.Second, "longest wait for HTTP requests when stopping")
	l.reportInterval, l.reportWindow = feed.DefaultReportInterval, feed.DefaultReportWindow
	l.maintenance = time.Hour
	fs.Var(cli.Duration{D: &l.maintenance}, "maintenance", "drop counter buckets past their retention and reclaim disk space this often (0 disables)")
	fs.Var(cli.Duration{D: &l.reportInterval}, "report-interval", "publish a credit snapshot per model to <prefix>.report.credit this often (0 disables)")
	fs.Var(cli.Duration{D: &l.reportWindow}, "report-window", "rolling `window` of the credit snapshots, ending at the latest event")
}

// runLive is live mode: consume the stream into dir until ctx ends.
func runLive(ctx context.Context, cfg config.Config, dir string, l liveFlags, stdout io.Writer, log *slog.Logger) (err error) {
	if l.httpToken == "" {
		l.httpToken = os.Getenv("TL_HTTP_TOKEN")
	}
	parts, err := stream.ParsePartitions(l.partitions, l.scfg.Partitions)
	if err != nil {
		return err
	}
	var truth *query.Truth
	if l.truthFile != "" {
		t, err := query.ReadTruth(l.truthFile)
		if err != nil {
			return err
		}
		truth = &t
	}
	if err := l.scfg.Validate(); err != nil {
		return err
	}
	if l.reportWindow <= 0 {
		return errors.New("--report-window must be positive")
	}
	if l.httpAddr != "off" && l.httpAddr != "" {
		if err := web.CheckListen(l.httpAddr, l.httpToken); err != nil {
			return err
		}
	}
	// The key before the directory: a bad key file creates nothing.
	ps, err := pipeline.PseudonymsFrom(cfg)
	if err != nil {
		return err
	}
	if err := os.MkdirAll(dir, 0o750); err != nil {
		return err
	}
	// The store first: its lock keeps a second worker on this directory
	// from starting an embedded server on the same JetStream directory,
	// and a wrong key is refused before anything is consumed.
	st, err := state.Open(ctx, pipeline.StoreOptions(dir, cfg))
	if err != nil {
		return err
	}
	defer func() {
		if cerr := st.Close(); err == nil {
			err = cerr
		}
	}()
	if err := pipeline.CheckKey(ctx, st, ps); err != nil {
		return err
	}

	// The bus: embedded unless --nats.
	url := l.nats.URL()
	opts, err := l.nats.Options("touchledger worker " + parts.String())
	if err != nil {
		return err
	}
	if url == "" {
		var srv *server.Server
		eopts := []stream.EmbedOption{stream.EmbedPort(l.port), stream.EmbedConfig(l.scfg), stream.EmbedLogger(log)}
		access := "open to every local process (--local-auth requires credentials)"
		var la stream.LocalAuth
		if l.localAuth {
			if la, err = stream.LoadOrCreateLocalAuth(dir); err != nil {
				return err
			}
			eopts = append(eopts, stream.EmbedAuth(la))
			opts.User, opts.Password = la.Worker.User, la.Worker.Password
			access = "credentials required"
		}
		srv, url, err = stream.StartEmbedded(dir, eopts...)
		if err != nil {
			return err
		}
		defer func() {
			srv.Shutdown()
			srv.WaitForShutdown()
		}()
		publish := "ingest send --nats " + url + " FILE"
		if l.localAuth {
			publish = "ingest send --nats " + url + " --nats-auth-file " + la.PublisherFile + " FILE"
		}
		fmt.Fprintf(stdout, "nats: %s (embedded, loopback only, %s; JetStream in %s; publish with: %s)\n",
			url, access, filepath.Join(dir, "nats"), publish)
	} else if l.localAuth {
		return errors.New("--local-auth is for the embedded server; with --nats give the server's credentials")
	}
	opts.URL = url
	nc, err := stream.Connect(opts, log)
	if err != nil {
		return err
	}
	defer drain(nc)
	js, err := jetstream.New(nc)
	if err != nil {
		return err
	}
	if err := stream.EnsureStreamRetry(ctx, js, l.scfg, log); err != nil {
		return err
	}

	// The processor.
	if ps != nil {
		l.scfg.SubjectUser = ps.Pseudonym // erasure finds subjects by the pseudonym's key
	}
	w, err := stream.NewWorker(js, l.scfg, parts, log)
	if err != nil {
		return err
	}
	disk := pipeline.DiskGuard(dir, cfg)
	if disk != nil {
		w.SetDiskGuard(disk)
		if _, err := disk.Check(); err != nil {
			log.Error("disk space low at start: the worker waits for space before fetching", "err", err)
		}
	}
	var (
		p *pipeline.Processor
		m *metrics.Metrics
	)
	pcfg := pipeline.FromConfig(cfg)
	pcfg.Pseudonyms = ps
	pcfg.Now = time.Now // live: max_future against the wall clock
	pcfg.OnCommit = func(string, pipeline.Checkpoint) {
		if m != nil && p != nil {
			m.ObserveCommit(p.Status().CommitTook)
		}
	}
	p, err = pipeline.New(st, w.ProcessorConfig(pcfg), w.DeadLetters(), log)
	if err != nil {
		return err
	}
	defer func() {
		if cerr := p.Close(); err == nil {
			err = cerr
		}
	}()
	qparams := query.ParamsFrom(cfg)
	openQuerier := func() (*query.Querier, error) { return query.NewQuerier(st, qparams) }

	// Metrics and HTTP.
	reg := prometheus.NewRegistry()
	reg.MustRegister(collectors.NewGoCollector(), collectors.NewProcessCollector(collectors.ProcessCollectorOpts{}))
	version, revision, goVersion := cli.Build()
	mopts := metrics.Options{
		Build:          metrics.BuildInfo{Version: version, Revision: revision, GoVersion: goVersion},
		Status:         p,
		OpenQuerier:    openQuerier,
		ConsumerLag:    w.Lag,
		SessionGap:     cfg.SessionGap.D(),
		JourneyTimeout: cfg.JourneyTimeout.D(),
		Interval:       cfg.Alert.Interval.D(),
	}
	if err := mopts.Validate(); err != nil {
		return err
	}
	m = metrics.New(reg, mopts)
	if disk != nil {
		reg.MustRegister(
			prometheus.NewGaugeFunc(prometheus.GaugeOpts{Name: "touchledger_disk_free_bytes", Help: "Free bytes of the data directory's disk, as of the last look (before each fetch)."},
				func() float64 { f, _ := disk.Free(); return float64(f) }),
			prometheus.NewGaugeFunc(prometheus.GaugeOpts{Name: "touchledger_disk_reserve_bytes", Help: "The free-space reserve (store.min_free_mib, store.min_free_percent)."},
				func() float64 { _, r := disk.Free(); return float64(r) }),
			prometheus.NewGaugeFunc(prometheus.GaugeOpts{Name: "touchledger_disk_low", Help: "1 while free space is below the reserve and the worker does not fetch."},
				func() float64 {
					if disk.Low() {
						return 1
					}
					return 0
				}),
		)
	}
	if l.httpAddr != "off" && l.httpAddr != "" {
		// /admin/backup always needs a token: the HTTP token, or one
		// generated into the directory.
		backupToken, tokenNote := l.httpToken, ""
		if backupToken == "" {
			tf := filepath.Join(dir, "backup.token")
			c, err := stream.LoadOrCreateToken(tf)
			if err != nil {
				return err
			}
			backupToken, tokenNote = c, "; /admin/backup needs the token in "+tf
		}
		idle := func(ctx context.Context) bool {
			lag, err := w.Lag(ctx)
			return err == nil && lag == 0 && w.Health().Committed == 0
		}
		h := web.NewHandler(web.Options{
			Gatherer:    reg,
			OpenQuerier: openQuerier,
			Ready:       readyUnlessDiskLow(disk, web.ReadyAfterCommit(p, idle)),
			Token:       l.httpToken,
			Log:         log,
			Page:        dashboard.NewHandler(dashboard.Options{Open: openQuerier, Title: "touchledger", Truth: truth}),
			Backup:      st.Backup,
			BackupToken: backupToken,
		})
		ln, err := web.Listen(ctx, l.httpAddr, l.httpToken)
		if err != nil {
			return err
		}
		srv := web.NewServer(ln.Addr().String(), h)
		go func() {
			if err := srv.Serve(ln); err != nil && !errors.Is(err, http.ErrServerClosed) {
				log.Error("http", "err", err)
			}
		}()
		defer func() {
			sctx, cancel := context.WithTimeout(context.Background(), l.shutdownWait)
			defer cancel()
			srv.Shutdown(sctx)
		}()
		fmt.Fprintf(stdout, "http: http://%s/ (metrics, healthz, readyz, api%s)\n", ln.Addr(), tokenNote)
	}

	// Queries over NATS for this worker's partitions.
	svc, err := remote.Register(nc, l.scfg.Prefix, parts.First, parts.Last, st, st.Resolutions(), qparams)
	if err != nil {
		return err
	}
	defer svc.Stop()

	// Erasure requests (<prefix>.admin.forget), handed to the processing
	// goroutine.
	admin, err := w.ServeAdmin(nc, log)
	if err != nil {
		return err
	}
	defer admin.Unsubscribe()

	// Retention: expired buckets leave the store (and the disk) on schedule.
	go w.MaintainEvery(ctx, l.maintenance, st.ReclaimSpace)

	// Feeds: alert transitions and credit snapshots, from store snapshots
	// on their own goroutine. The start rule looks at the committed data
	// as it is before the worker consumes.
	fo := feed.Options{
		Conn:           nc,
		Prefix:         l.scfg.Prefix,
		Partitions:     parts.String(),
		Open:           openQuerier,
		Watermark:      func() time.Time { return p.Status().Watermark },
		SessionGap:     cfg.SessionGap.D(),
		Interval:       cfg.Alert.Interval.D(),
		Lookback:       cfg.Alert.Baseline.D(),
		StateFile:      filepath.Join(dir, "feeds.json"),
		ReportInterval: l.reportInterval,
		ReportWindow:   l.reportWindow,
		Log:            log.With("from", "feed"),
	}
	if wm, _ := p.Watermark(); wm != math.MinInt64 {
		fo.StartWatermark = time.Unix(0, wm).UTC()
	}
	fd, err := feed.Start(ctx, fo)
	if err != nil {
		return err
	}
	defer fd.Stop()
	fmt.Fprintf(stdout, "worker: partitions %s of %d, stream %s, consumer %s, data %s\n",
		parts, l.scfg.Partitions, l.scfg.Stream, w.Consumer(), dir)
	reports := "off"
	if l.reportInterval > 0 {
		reports = fmt.Sprintf("every %s over %s", config.Duration(l.reportInterval), config.Duration(l.reportWindow))
	}
	fmt.Fprintf(stdout, "feeds: alerts on %s.alert.<name>, credit on %s (%s); erasure requests on %s\n",
		l.scfg.Prefix, feed.ReportSubject(l.scfg.Prefix), reports, stream.ForgetSubject(l.scfg.Prefix))
	if f, ok := stdout.(*os.File); ok {
		f.Sync()
	}

	start := time.Now()
	if err := w.Run(ctx, p); err != nil {
		return err
	}
	s := p.Status()
	c := s.Counts
	fmt.Fprintf(stdout, "stopped: accepted %d, duplicate %d, rejected %d, late %d, buffered %d (ran %s)\n",
		c.Accepted, c.Duplicate, c.RejectedTotal(), c.Late, s.Buffered, time.Since(start).Round(time.Second))
	return nil
}

// readyUnlessDiskLow is ready, unless the disk is below its reserve (the
// worker then does not fetch).
func readyUnlessDiskLow(disk *state.DiskGuard, ready func(context.Context) error) func(context.Context) error {
	return func(ctx context.Context) error {
		if disk != nil && disk.Low() {
			free, reserve := disk.Free()
			return fmt.Errorf("%w: %d MiB free, reserve %d MiB; not fetching", state.ErrDiskLow, free>>20, reserve>>20)
		}
		return ready(ctx)
	}
}

// drain flushes the connection (the last acknowledgements) and closes it.
// A lost acknowledgement is harmless: the next start repositions the
// consumer from the committed checkpoint.
func drain(nc *nats.Conn) {
	closed := make(chan struct{})
	nc.SetClosedHandler(func(*nats.Conn) { close(closed) })
	if err := nc.Drain(); err != nil {
		nc.Close()
		return
	}
	select {
	case <-closed:
	case <-time.After(5 * time.Second):
		nc.Close()
	}
}
