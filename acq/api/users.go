package api

import (
	"context"
	"crypto/sha256"
	"crypto/subtle"
	"encoding/hex"
	"fmt"
	"regexp"
	"strings"

	"hystd/configs"
)

// Role is what a user of the API may do. Each role may do what the ones
// before it may.
type Role int

// The roles, least first.
const (
	// RoleReview reads: runs, loops, reports, exports (and the event
	// stream and metrics when reads need a token). No mutation.
	RoleReview Role = iota + 1
	// RoleOperate also runs the fixtures: start (submit), abort, confirm a
	// mount, import a recording.
	RoleOperate
	// RoleAdmin also acts on the daemon's data path and setup: requeue the
	// outbox, and every config-changing action.
	RoleAdmin
)

var roleNames = map[Role]string{RoleReview: "review", RoleOperate: "operate", RoleAdmin: "admin"}

func (r Role) String() string {
	if n, ok := roleNames[r]; ok {
		return n
	}
	return fmt.Sprintf("role(%d)", int(r))
}

// User is who a request was authenticated as.
type User struct {
	Name string
	Role Role
}

// SharedTokenUser is the name the single token of http.token_file acts
// under (role admin, as that token could always do everything).
const SharedTokenUser = "shared-token"

// UsersKind is the document kind of a users file.
const UsersKind = "users"

// Credential is a user with the SHA-256 of their token. Only the hash is
// kept: a token is a random secret of 256 bits (hystd token makes one), so
// a fast hash loses nothing — guessing a preimage of a 256-bit random
// value is out of reach whatever the hash's speed; slow password hashes
// (bcrypt, Argon2) exist for the low entropy of chosen passwords.
type Credential struct {
	User
	Hash [sha256.Size]byte
}

// usersFile is a `kind: users` file.
type usersFile struct {
	Kind  string `yaml:"kind"`
	Users []struct {
		Name        string `yaml:"name"`
		Role        string `yaml:"role"`
		TokenSHA256 string `yaml:"token_sha256"`
	} `yaml:"users"`
}

var userName = regexp.MustCompile(`^[A-Za-z0-9][A-Za-z0-9._-]{0,63}$`)

// LoadUsers reads a users file (`kind: users`): a list of users, each with
// name, role (review, operate, admin) and token_sha256 (64 hex digits, the
// SHA-256 of the token). Every problem is an error FILE:LINE: key: problem.
func LoadUsers(path string) ([]Credential, error) {
	data, err := configs.ReadFile(path)
	if err != nil {
		return nil, err
	}
	doc, err := configs.Parse(path, data)
	if err != nil {
		return nil, err
	}
	return UsersFrom(doc)
}

// UsersFrom validates a parsed users document (see LoadUsers).
func UsersFrom(doc *configs.Doc) ([]Credential, error) {
	var f usersFile
	if err := doc.Decode(&f); err != nil {
		return nil, err
	}
	var es configs.Errors
	add := func(p, format string, a ...any) { es = append(es, doc.Errorf(p, format, a...)) }
	if f.Kind != UsersKind {
		add("kind", "want %q, got %q", UsersKind, f.Kind)
	}
	if len(f.Users) == 0 {
		add("users", "required: at least one user with name, role and token_sha256")
	}
	var out []Credential
	names, hashes := map[string]int{}, map[[sha256.Size]byte]int{}
	for i, u := range f.Users {
		p := fmt.Sprintf("users.%d", i)
		c := Credential{User: User{Name: u.Name}}
		if !userName.MatchString(u.Name) || u.Name == SharedTokenUser {
			add(p+".name", "%q: want 1–64 letters, digits, '.', '_' or '-' (not %s)", u.Name, SharedTokenUser)
		} else if j, dup := names[u.Name]; dup {
			add(p+".name", "%s is also users.%d", u.Name, j)
		}
		names[u.Name] = i
		for r, n := range roleNames {
			if n == u.Role {
				c.Role = r
			}
		}
		if c.Role == 0 {
			add(p+".role", "%q: want review, operate or admin", u.Role)
		}
		b, err := hex.DecodeString(strings.TrimPrefix(u.TokenSHA256, "sha256:"))
		switch {
		case err != nil || len(b) != sha256.Size:
			add(p+".token_sha256", "want the token's SHA-256 as 64 hex digits (hystd token makes a token and its line), got %d characters", len(u.TokenSHA256))
		default:
			copy(c.Hash[:], b)
			if j, dup := hashes[c.Hash]; dup {
				add(p+".token_sha256", "the same token as users.%d: each user needs their own", j)
			}
			hashes[c.Hash] = i
		}
		out = append(out, c)
	}
	if len(es) > 0 {
		return nil, es
	}
	return out, nil
}

// TokenHash is the SHA-256 of a token as a users file holds it (hex).
func TokenHash(token string) string {
	sum := sha256.Sum256([]byte(token))
	return hex.EncodeToString(sum[:])
}

// lookup finds the credential whose hash is the token's. Every entry is
// compared, in constant time each, so the time taken does not tell which
// entry (or whether any) matched.
func lookup(creds []Credential, token string) (User, bool) {
	sum := sha256.Sum256([]byte(token))
	var found User
	ok := 0
	for _, c := range creds {
		m := subtle.ConstantTimeCompare(sum[:], c.Hash[:])
		if m == 1 {
			found = c.User
		}
		ok |= m
	}
	return found, ok == 1
}

// ActionRecorder is a Runner that records with a stored run what the user
// of ctx (UserFrom) did to it; the API calls it for mutations the Runner
// does not see itself (an outbox requeue).
type ActionRecorder interface {
	RecordAction(ctx context.Context, runID, action string) error
}

type userKey struct{}

// WithUser returns ctx carrying u as the authenticated user.
func WithUser(ctx context.Context, u User) context.Context {
	return context.WithValue(ctx, userKey{}, u)
}

// UserFrom returns the user a request was authenticated as (the handlers'
// contexts carry it to the Runner); false outside an authenticated request.
func UserFrom(ctx context.Context) (User, bool) {
	u, ok := ctx.Value(userKey{}).(User)
	return u, ok
}

// actionPrefix starts the event that records a user's action on a run:
// "user NAME (ROLE): ACTION".
const actionPrefix = "user "

// ActionText is the event text that records u's action on a run.
func ActionText(u User, action string) string {
	return fmt.Sprintf("%s%s (%s): %s", actionPrefix, u.Name, u.Role, action)
}

// ActionAbort is the action of an abort request.
const ActionAbort = "abort requested"

// actionBy returns the user named in an event ActionText made for action.
func actionBy(text, action string) (string, bool) {
	rest, ok := strings.CutPrefix(text, actionPrefix)
	if !ok || !strings.HasSuffix(rest, "): "+action) {
		return "", false
	}
	name, _, ok := strings.Cut(rest, " (")
	return name, ok
}
