package influx

import (
	"bytes"
	"compress/gzip"
	"context"
	"encoding/base64"
	"errors"
	"net/http"
	"net/url"
	"strings"

	ihttp "github.com/influxdata/influxdb-client-go/v2/api/http"
)

// lineWriter writes lines of line protocol and returns an error the forwarder
// classifies (an *ihttp.Error for an HTTP status). The client's
// api.WriteAPIBlocking is one; v1Writer is the other.
type lineWriter interface {
	WriteRecord(ctx context.Context, lines ...string) error
}

// v1Writer writes to the InfluxDB 1.x endpoint POST /write?db=&rp=&precision=ns.
// The client library's write API knows only /api/v2/write, so the request is
// built here but sent through the client's own HTTP service (same transport,
// TLS settings, timeout and error parsing as the v2 path).
type v1Writer struct {
	svc  ihttp.Service
	url  string
	auth string // Authorization header value, "" for none
	gzip bool
}

// v1Auth turns the token into the Authorization header of InfluxDB 1.x:
// "user:password" becomes HTTP basic authentication; no token, none.
func v1Auth(tok string) (string, error) {
	if tok == "" {
		return "", nil
	}
	if !strings.Contains(tok, ":") {
		return "", errors.New("api v1 takes the token as user:password (InfluxDB 1.x authentication)")
	}
	return "Basic " + base64.StdEncoding.EncodeToString([]byte(tok)), nil
}

// V1WriteURL is the v1 write URL for cfg: URL (with its path, if any) +
// /write?db=DATABASE&rp=POLICY&precision=ns, from bucket "DATABASE[/POLICY]".
func V1WriteURL(cfg Config) string {
	db, rp, _ := strings.Cut(cfg.Bucket, "/")
	q := url.Values{}
	q.Set("db", db)
	if rp != "" {
		q.Set("rp", rp)
	}
	q.Set("precision", "ns")
	return strings.TrimSuffix(cfg.URL, "/") + "/write?" + q.Encode()
}

func newV1Writer(svc ihttp.Service, cfg Config, auth string) *v1Writer {
	return &v1Writer{svc: svc, url: V1WriteURL(cfg), auth: auth, gzip: cfg.Gzip}
}

func (w *v1Writer) WriteRecord(ctx context.Context, lines ...string) error {
	var body bytes.Buffer
	var dst interface {
		Write([]byte) (int, error)
	} = &body
	var zw *gzip.Writer
	if w.gzip {
		zw = gzip.NewWriter(&body)
		dst = zw
	}
	for _, l := range lines {
		if _, err := dst.Write([]byte(l)); err != nil {
			return err
		}
		if _, err := dst.Write([]byte{'\n'}); err != nil {
			return err
		}
	}
	if zw != nil {
		if err := zw.Close(); err != nil {
			return err
		}
	}
	perr := w.svc.DoPostRequest(ctx, w.url, &body, func(req *http.Request) {
		req.Header.Del("Authorization") // the service's "Token …" is v2's scheme
		if w.auth != "" {
			req.Header.Set("Authorization", w.auth)
		}
		req.Header.Set("Content-Type", "text/plain; charset=utf-8")
		if w.gzip {
			req.Header.Set("Content-Encoding", "gzip")
		}
	}, func(resp *http.Response) error { return resp.Body.Close() })
	if perr != nil {
		return perr
	}
	return nil
}
