// Package pgtest gives tests a real PostgreSQL server: a throwaway cluster
// made with Debian's postgresql package (initdb in a temporary folder, run as
// an unprivileged user, listening on a free loopback port with its unix
// socket in that folder, removed when the test binary ends), or the server
// named by the environment variable NIGHTLOOM_TEST_POSTGRES (a DSN whose
// user may create databases).
//
// One cluster serves the whole test binary: a package that uses it calls
// Main from its TestMain, and each test asks NewDatabase for a fresh, empty
// database. When PostgreSQL is missing, NewDatabase skips the test naming the
// package (locally) or fails it (under CI=true) through internal/testenv.
package pgtest

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"net"
	"net/url"
	"os"
	"os/exec"
	"os/user"
	"path/filepath"
	"sort"
	"strconv"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"

	"github.com/nightloom/nightloom/internal/testenv"
)

// EnvDSN names the environment variable that points the tests at an existing
// server instead of a throwaway cluster.
const EnvDSN = "NIGHTLOOM_TEST_POSTGRES"

// debianPackage is the package that provides initdb and pg_ctl.
const debianPackage = "postgresql"

var (
	once     sync.Once
	adminDSN string // DSN of the maintenance database ("postgres")
	startErr error  // why no server is available
	missing  string // what binary is missing, when that is the reason
	cluster  *throwaway
	dbSeq    atomic.Int64
)

// Main runs the tests and stops the throwaway cluster (if one was started)
// after them. Use it as `func TestMain(m *testing.M) { os.Exit(pgtest.Main(m)) }`.
func Main(m *testing.M) int {
	code := m.Run()
	if cluster != nil {
		cluster.stop()
	}
	return code
}

// Available starts the server if needed and returns its admin DSN, or skips
// (locally) / fails (CI) the test when PostgreSQL is missing. A server that
// is installed but fails to start fails the test everywhere.
func Available(t testing.TB) string {
	t.Helper()
	once.Do(start)
	if missing != "" {
		testenv.Missing(t, debianPackage, missing)
	}
	if startErr != nil {
		t.Fatalf("pgtest: %v", startErr)
	}
	return adminDSN
}

// NewDatabase creates a fresh, empty database on the shared server and
// returns its DSN; the database is dropped when t ends.
func NewDatabase(t testing.TB) string {
	t.Helper()
	admin := Available(t)
	name := fmt.Sprintf("nl_%d_%d", os.Getpid(), dbSeq.Add(1))
	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()
	if err := adminExec(ctx, admin, `CREATE DATABASE `+name+` TEMPLATE template0 ENCODING 'UTF8'`); err != nil {
		t.Fatalf("pgtest: create database %s: %v", name, err)
	}
	t.Cleanup(func() {
		ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
		defer cancel()
		if err := adminExec(ctx, admin, `DROP DATABASE IF EXISTS `+name+` WITH (FORCE)`); err != nil {
			t.Logf("pgtest: drop database %s: %v", name, err)
		}
	})
	return withDatabase(admin, name)
}

func adminExec(ctx context.Context, dsn, sql string) error {
	conn, err := pgx.Connect(ctx, dsn)
	if err != nil {
		return err
	}
	defer conn.Close(context.Background())
	_, err = conn.Exec(ctx, sql)
	return err
}

// withDatabase returns dsn with its database name replaced.
func withDatabase(dsn, name string) string {
	u, err := url.Parse(dsn)
	if err != nil || u.Scheme == "" {
		return dsn + " dbname=" + name // key=value form
	}
	u.Path = "/" + name
	return u.String()
}

func start() {
	if dsn := os.Getenv(EnvDSN); dsn != "" {
		adminDSN = dsn
		ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
		defer cancel()
		if err := adminExec(ctx, dsn, `SELECT 1`); err != nil {
			startErr = fmt.Errorf("%s=%q: %w", EnvDSN, dsn, err)
		}
		return
	}
	bin, err := findBin()
	if err != nil {
		missing = err.Error()
		return
	}
	cluster, startErr = startCluster(bin)
	if startErr == nil {
		adminDSN = cluster.dsn("postgres")
	}
}

// findBin returns the folder of the newest PostgreSQL server binaries that
// Debian's package installs under /usr/lib/postgresql/<major>/bin.
func findBin() (string, error) {
	dirs, _ := filepath.Glob("/usr/lib/postgresql/*/bin")
	sort.Slice(dirs, func(i, j int) bool { return majorOf(dirs[i]) > majorOf(dirs[j]) })
	for _, d := range dirs {
		if _, err := os.Stat(filepath.Join(d, "initdb")); err == nil {
			return d, nil
		}
	}
	if p, err := exec.LookPath("initdb"); err == nil {
		return filepath.Dir(p), nil
	}
	return "", errors.New("initdb not found under /usr/lib/postgresql/*/bin or on PATH")
}

func majorOf(binDir string) int {
	n, _ := strconv.Atoi(filepath.Base(filepath.Dir(binDir)))
	return n
}

// throwaway is a cluster in a temporary folder.
type throwaway struct {
	bin, dir, data string
	port           int
	runAs          string // "" when the test runs as an ordinary user
}

// User is the superuser of the throwaway cluster.
const User = "nightloom"

func (c *throwaway) dsn(db string) string {
	return fmt.Sprintf("postgres://%s@127.0.0.1:%d/%s?sslmode=disable", User, c.port, db)
}

// command runs a server binary, as the unprivileged user when the tests run
// as root (initdb and postgres refuse to run as root).
func (c *throwaway) command(name string, args ...string) *exec.Cmd {
	path := filepath.Join(c.bin, name)
	if c.runAs != "" {
		return exec.Command("runuser", append([]string{"-u", c.runAs, "--", path}, args...)...)
	}
	return exec.Command(path, args...)
}

func startCluster(bin string) (*throwaway, error) {
	c := &throwaway{bin: bin}
	if os.Geteuid() == 0 {
		// Debian's package creates the system user postgres.
		if _, err := user.Lookup("postgres"); err != nil {
			return nil, fmt.Errorf("running as root and there is no user postgres to run the server as: %w", err)
		}
		c.runAs = "postgres"
	}
	dir, err := os.MkdirTemp("", "nightloom-pg-")
	if err != nil {
		return nil, err
	}
	c.dir, c.data = dir, filepath.Join(dir, "data")
	if c.runAs != "" {
		u, _ := user.Lookup(c.runAs)
		uid, _ := strconv.Atoi(u.Uid)
		gid, _ := strconv.Atoi(u.Gid)
		if err := os.Chown(dir, uid, gid); err != nil {
			os.RemoveAll(dir)
			return nil, err
		}
	}
	fail := func(what string, err error, out []byte) (*throwaway, error) {
		log, _ := os.ReadFile(filepath.Join(dir, "log"))
		os.RemoveAll(dir)
		return nil, fmt.Errorf("%s: %v\n%s\n%s", what, err, bytes.TrimSpace(out), bytes.TrimSpace(log))
	}
	if out, err := c.command("initdb", "-D", c.data, "-U", User, "--auth=trust", "-E", "UTF8", "--no-sync").CombinedOutput(); err != nil {
		return fail("initdb", err, out)
	}
	for attempt := 0; ; attempt++ {
		if c.port, err = freePort(); err != nil {
			return fail("free port", err, nil)
		}
		opts := fmt.Sprintf("-p %d -k %s -c listen_addresses=127.0.0.1 -c max_connections=300 -c shared_buffers=64MB", c.port, dir)
		out, err := c.command("pg_ctl", "-D", c.data, "-l", filepath.Join(dir, "log"), "-o", opts, "-w", "-t", "60", "start").CombinedOutput()
		if err == nil {
			break
		}
		if attempt >= 2 { // the port may have been taken between freePort and start
			return fail("pg_ctl start", err, out)
		}
	}
	return c, nil
}

func (c *throwaway) stop() {
	_ = c.command("pg_ctl", "-D", c.data, "-m", "immediate", "-w", "stop").Run()
	os.RemoveAll(c.dir)
}

func freePort() (int, error) {
	l, err := net.Listen("tcp", "127.0.0.1:0")
	if err != nil {
		return 0, err
	}
	defer l.Close()
	return l.Addr().(*net.TCPAddr).Port, nil
}
