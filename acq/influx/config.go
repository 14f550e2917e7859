package influx

import (
	"crypto/tls"
	"crypto/x509"
	"errors"
	"fmt"
	"net/url"
	"os"
	"sort"
	"strings"
	"time"

	"hystd/configs"
)

// DefaultTokenEnv is the environment variable read for the token when the
// config names neither a token file nor another variable.
const DefaultTokenEnv = "HYSTD_INFLUX_TOKEN"

// Config says where and how the forwarder writes. It never holds the token
// itself: the token is read from TokenFile or the TokenEnv variable when the
// forwarder is created, so printing or logging a Config reveals no secret.
type Config struct {
	Kind string `yaml:"kind"` // "influx"
	// URL is the server's base URL, e.g. http://127.0.0.1:8086; the client
	// appends /api/v2/write (api v2) or /write (api v1). A path in the URL
	// is kept in front of it: a cluster's tenant path such as
	// http://vminsert:8480/insert/42/influx, or a reverse proxy's prefix.
	URL string `yaml:"url"`
	// API is the write protocol: "v2" (default: /api/v2/write, for InfluxDB
	// 2.x, 3, 1.8+ and VictoriaMetrics) or "v1" (/write?db=&rp=&precision=ns,
	// for InfluxDB 1.x before 1.8, which has no v2 write endpoint).
	API string `yaml:"api"`
	// Org and Bucket name the destination. InfluxDB 1.x (api v1, or 1.8 with
	// api v2): org is ignored, bucket is "database" or
	// "database/retention-policy". VictoriaMetrics ignores both.
	Org    string `yaml:"org"`
	Bucket string `yaml:"bucket"`
	// Tags are static tags put on every point (site, bay, host …), so that
	// many daemons can write to one database with the same fixture names.
	// They may not reuse a tag hystd sets itself (see ReservedTags).
	Tags map[string]string `yaml:"tags"`
	// TokenFile is a file holding the token (surrounding white space is
	// removed). InfluxDB 1.x takes "user:password" as its token (api v1
	// sends it as HTTP basic authentication).
	TokenFile string `yaml:"token_file"`
	// TokenEnv names the environment variable holding the token when
	// TokenFile is empty; "" means DefaultTokenEnv. No token at all is
	// allowed (servers without authentication).
	TokenEnv string `yaml:"token_env"`
	TLS      TLS    `yaml:"tls"`
	// Gzip compresses request bodies.
	Gzip bool `yaml:"gzip"`
	// BatchSize is the number of points per write request; 0 means 5000.
	BatchSize int `yaml:"batch_size"`
	// Timeout bounds one write request; 0 means 30 s.
	Timeout configs.Duration `yaml:"timeout"`
	// MinBackoff and MaxBackoff bound the wait after a failed write, which
	// doubles from MinBackoff up to MaxBackoff; 0 means 1 s and 2 min.
	MinBackoff configs.Duration `yaml:"min_backoff"`
	MaxBackoff configs.Duration `yaml:"max_backoff"`
	// PollInterval is how often an idle forwarder looks for new loops; 0 means 2 s.
	PollInterval configs.Duration `yaml:"poll_interval"`
}

// TLS configures HTTPS to the server.
type TLS struct {
	// CAFile is a PEM bundle of the authorities to trust in addition to the
	// system's.
	CAFile string `yaml:"ca_file"`
	// InsecureSkipVerify accepts any server certificate (test benches only).
	InsecureSkipVerify bool `yaml:"insecure_skip_verify"`
}

// Write protocols (Config.API).
const (
	APIv2 = "v2"
	APIv1 = "v1"
)

// ReservedTags are the tags the encoder sets itself; static tags may not use
// them.
var ReservedTags = []string{"branch", "fixture", "kind", "loop", "material", "revision", "run", "software", "specimen"}

// Defaults of Config.
const (
	DefaultBatchSize    = 5000
	MaxBatchSize        = 100_000
	DefaultTimeout      = 30 * time.Second
	DefaultMinBackoff   = time.Second
	DefaultMaxBackoff   = 2 * time.Minute
	DefaultPollInterval = 2 * time.Second
)

// WithDefaults returns c with zero fields set to their defaults.
func (c Config) WithDefaults() Config {
	if c.Kind == "" {
		c.Kind = "influx"
	}
	if c.API == "" {
		c.API = APIv2
	}
	if c.TokenEnv == "" {
		c.TokenEnv = DefaultTokenEnv
	}
	if c.BatchSize == 0 {
		c.BatchSize = DefaultBatchSize
	}
	if c.Timeout == 0 {
		c.Timeout = configs.Duration(DefaultTimeout)
	}
	if c.MinBackoff == 0 {
		c.MinBackoff = configs.Duration(DefaultMinBackoff)
	}
	if c.MaxBackoff == 0 {
		c.MaxBackoff = configs.Duration(DefaultMaxBackoff)
	}
	if c.PollInterval == 0 {
		c.PollInterval = configs.Duration(DefaultPollInterval)
	}
	return c
}

// Problem is one invalid setting: the YAML key and what is wrong.
type Problem struct{ Key, Msg string }

// Problems lists what is wrong with c (after WithDefaults), by YAML key.
func (c Config) Problems() []Problem {
	var ps []Problem
	add := func(k, f string, a ...any) { ps = append(ps, Problem{k, fmt.Sprintf(f, a...)}) }
	if c.Kind != "influx" {
		add("kind", "want \"influx\", got %q", c.Kind)
	}
	if c.URL == "" {
		add("url", "required, e.g. http://127.0.0.1:8086")
	} else if u, err := url.Parse(c.URL); err != nil || (u.Scheme != "http" && u.Scheme != "https") || u.Host == "" {
		add("url", "%q is not an http:// or https:// URL with a host", c.URL)
	} else if u.User != nil {
		add("url", "must not carry credentials; use token_file or token_env")
	}
	if c.API != APIv2 && c.API != APIv1 {
		add("api", "want v2 or v1, got %q", c.API)
	}
	if strings.TrimSpace(c.Bucket) == "" {
		add("bucket", "required")
	} else if c.API == APIv1 && strings.Count(c.Bucket, "/") > 1 {
		add("bucket", "api v1 takes \"database\" or \"database/retention-policy\", got %q", c.Bucket)
	}
	for _, k := range sortedKeys(c.Tags) {
		if msg := tagProblem(k, c.Tags[k]); msg != "" {
			add("tags."+k, "%s", msg)
		}
	}
	if c.BatchSize < 1 || c.BatchSize > MaxBatchSize {
		add("batch_size", "%d is outside 1…%d", c.BatchSize, MaxBatchSize)
	}
	for _, d := range []struct {
		k string
		v configs.Duration
	}{{"timeout", c.Timeout}, {"min_backoff", c.MinBackoff}, {"max_backoff", c.MaxBackoff}, {"poll_interval", c.PollInterval}} {
		if d.v <= 0 {
			add(d.k, "must be positive, got %s", d.v.D())
		}
	}
	if c.MaxBackoff < c.MinBackoff {
		add("max_backoff", "%s is shorter than min_backoff %s", c.MaxBackoff.D(), c.MinBackoff.D())
	}
	if c.TLS.CAFile != "" {
		if _, err := os.Stat(c.TLS.CAFile); err != nil {
			add("tls.ca_file", "cannot read %s: %v", c.TLS.CAFile, errors.Unwrap(err))
		}
	}
	if c.TokenFile != "" {
		if _, err := os.Stat(c.TokenFile); err != nil {
			add("token_file", "cannot read %s: %v", c.TokenFile, errors.Unwrap(err))
		}
	}
	return ps
}

// tagProblem says what is wrong with a static tag, or "".
func tagProblem(k, v string) string {
	if !validTagKey(k) {
		return "a tag name is a letter followed by letters, digits, _ or -"
	}
	for _, r := range ReservedTags {
		if k == r {
			return "hystd sets this tag itself; choose another name (e.g. site, bay, host)"
		}
	}
	if strings.TrimSpace(v) == "" {
		return "empty value"
	}
	if strings.ContainsAny(v, "\r\n\\") {
		return "a value may not hold a line break or a backslash"
	}
	return ""
}

func validTagKey(k string) bool {
	if k == "" || len(k) > 64 {
		return false
	}
	for i, r := range k {
		switch {
		case r >= 'a' && r <= 'z', r >= 'A' && r <= 'Z':
		case i > 0 && (r >= '0' && r <= '9' || r == '_' || r == '-'):
		default:
			return false
		}
	}
	return true
}

func sortedKeys(m map[string]string) []string {
	ks := make([]string, 0, len(m))
	for k := range m {
		ks = append(ks, k)
	}
	sort.Strings(ks)
	return ks
}

// ParseTag parses a static tag given as NAME=VALUE (the demo's --influx-tag).
func ParseTag(s string) (k, v string, err error) {
	k, v, ok := strings.Cut(s, "=")
	if !ok {
		return "", "", fmt.Errorf("%q: want NAME=VALUE, e.g. site=north-lab", s)
	}
	if msg := tagProblem(k, v); msg != "" {
		return "", "", fmt.Errorf("%q: %s", s, msg)
	}
	return k, v, nil
}

// Validate returns the problems of c as one error, or nil.
func (c Config) Validate() error {
	var msgs []string
	for _, p := range c.Problems() {
		msgs = append(msgs, p.Key+": "+p.Msg)
	}
	if len(msgs) == 0 {
		return nil
	}
	return errors.New("influx config: " + strings.Join(msgs, "; "))
}

// LoadConfig parses a config file of kind "influx" strictly (see package
// configs), applies defaults and validates it. Errors are "FILE:LINE: key:
// problem".
func LoadConfig(file string, data []byte) (Config, error) {
	doc, err := configs.Parse(file, data)
	if err != nil {
		return Config{}, err
	}
	return ConfigFrom(doc)
}

// ConfigFrom decodes, completes and validates a parsed influx document.
func ConfigFrom(doc *configs.Doc) (Config, error) {
	var c Config
	if err := doc.Decode(&c); err != nil {
		return Config{}, err
	}
	if c.Kind == "" {
		return Config{}, doc.Errorf("kind", "required: kind: influx")
	}
	c = c.WithDefaults()
	var es configs.Errors
	for _, p := range c.Problems() {
		es = append(es, doc.Errorf(p.Key, "%s", p.Msg))
	}
	if err := es.Err(); err != nil {
		return Config{}, err
	}
	return c, nil
}

// token reads the token as configured. Errors name the file or variable,
// never the content.
func (c Config) token() (string, error) {
	if c.TokenFile != "" {
		b, err := os.ReadFile(c.TokenFile)
		if err != nil {
			return "", fmt.Errorf("token_file: %w", err)
		}
		tok := strings.TrimSpace(string(b))
		if tok == "" {
			return "", fmt.Errorf("token_file: %s is empty", c.TokenFile)
		}
		if strings.ContainsAny(tok, "\r\n") {
			return "", fmt.Errorf("token_file: %s holds more than one line", c.TokenFile)
		}
		return tok, nil
	}
	env := c.TokenEnv
	if env == "" {
		env = DefaultTokenEnv
	}
	return strings.TrimSpace(os.Getenv(env)), nil
}

// tlsConfig builds the client TLS settings, or nil for the defaults.
func (c Config) tlsConfig() (*tls.Config, error) {
	if c.TLS.CAFile == "" && !c.TLS.InsecureSkipVerify {
		return nil, nil
	}
	tc := &tls.Config{MinVersion: tls.VersionTLS12, InsecureSkipVerify: c.TLS.InsecureSkipVerify} //nolint:gosec // opt-in for test benches
	if c.TLS.CAFile != "" {
		pem, err := os.ReadFile(c.TLS.CAFile)
		if err != nil {
			return nil, fmt.Errorf("tls.ca_file: %w", err)
		}
		pool, err := x509.SystemCertPool()
		if err != nil || pool == nil {
			pool = x509.NewCertPool()
		}
		if !pool.AppendCertsFromPEM(pem) {
			return nil, fmt.Errorf("tls.ca_file: %s holds no PEM certificate", c.TLS.CAFile)
		}
		tc.RootCAs = pool
	}
	return tc, nil
}
