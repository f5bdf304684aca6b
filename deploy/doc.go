// Package deploy holds no code: it is the home of touchledger's deployment
// files and of the tests that check them (deploy_test.go).
//
//	nats/        three-node NATS JetStream cluster: n1.conf, n2.conf, n3.conf,
//	             accounts.conf (accounts, users, permissions, the partition
//	             mapping), user-secrets.conf.example and
//	             route-secrets.conf.example (templates of the secrets files)
//	systemd/     touchledger-worker@.service (one instance per partition range),
//	             worker.env.example
//	prometheus/  prometheus.yml (scrape configuration), rules.yml (recording and
//	             alerting rules), rules_test.yml (promtool unit tests),
//	             targets/workers.yml.example (file-based discovery)
//
// Inputs of the tests: these files. Outputs: none; the tests only read them,
// run promtool on copies in a temporary directory and start NATS servers on
// 127.0.0.1.
//
// Invariants the tests hold the files to:
//   - every node maps tl.in.<kind>.<ukey> to tl.ev.<p>.<kind>.<ukey> with
//     p = FNV-1a-32(ukey) mod 16 (nats-server's partition(16,2) subject
//     transform; FNV-1a as published by Fowler, Noll and Vo), so one user's
//     events stay in one partition;
//   - JetStream is on with sync_interval always, and the routes of every node
//     name all three nodes;
//   - each role may only do its own job: publishers (account PUBLISH) publish
//     tl.in.>, workers consume TL_EVENTS and serve tl.svc.>, query users
//     (account QUERY) ask tl.svc.> and read the feeds, only the admin
//     publishes tl.admin.>;
//   - the unedited secrets template cannot start a server, and its password
//     placeholders match no password;
//   - the Prometheus configuration and rules pass promtool, and the rule unit
//     tests pass.
package deploy
