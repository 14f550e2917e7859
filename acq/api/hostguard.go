package api

import (
	"encoding/json"
	"net"
	"net/http"
	"strings"
)

// HostGuard answers 403 to a request whose Host header names neither the
// address the server is bound to nor one of names. A page on another site
// whose name an attacker re-points at this machine (DNS rebinding) sends
// its own name as Host and is refused, so it cannot read the API.
//
// Accepted: one of names (case-insensitive, any port); the bound IP itself;
// any IP literal when bound to all addresses (0.0.0.0 or ::), since a
// literal IP cannot be re-pointed; and "localhost" when bound to a loopback
// or to all addresses. bound is the listener's address (host:port).
func HostGuard(h http.Handler, bound string, names []string) http.Handler {
	host, _, err := net.SplitHostPort(bound)
	if err != nil {
		host = bound
	}
	ip := net.ParseIP(host)
	allowed := map[string]bool{}
	for _, n := range names {
		allowed[strings.ToLower(strings.TrimSuffix(n, "."))] = true
	}
	ok := func(hostHeader string) bool {
		name := hostHeader
		if h, _, err := net.SplitHostPort(hostHeader); err == nil {
			name = h
		}
		name = strings.ToLower(strings.TrimSuffix(strings.TrimSuffix(strings.TrimPrefix(name, "["), "]"), "."))
		if name == "" {
			return false
		}
		if allowed[name] {
			return true
		}
		if ip == nil { // bound by name: that name
			return strings.EqualFold(name, host)
		}
		if hip := net.ParseIP(name); hip != nil {
			return ip.IsUnspecified() || hip.Equal(ip)
		}
		return name == "localhost" && (ip.IsLoopback() || ip.IsUnspecified())
	}
	return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		if !ok(r.Host) {
			w.Header().Set("Content-Type", "application/json; charset=utf-8")
			w.WriteHeader(http.StatusForbidden)
			_ = json.NewEncoder(w).Encode(map[string]string{"error": "Host " + quote(r.Host) +
				" is not this daemon's address (" + bound + ") nor a name in http.hosts; add the name there to reach it by that name"})
			return
		}
		h.ServeHTTP(w, r)
	})
}

func quote(s string) string {
	b, _ := json.Marshal(s)
	return string(b)
}

// IsLoopback reports whether a listen address (host:port) reaches this
// machine only: a loopback IP, or "localhost".
func IsLoopback(addr string) bool {
	host, _, err := net.SplitHostPort(addr)
	if err != nil {
		return false
	}
	if strings.EqualFold(host, "localhost") {
		return true
	}
	ip := net.ParseIP(host)
	return ip != nil && ip.IsLoopback()
}
