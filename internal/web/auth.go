package web

// Sign-in: a bearer token of a role that may read sites and plans is given
// once, in a POST form, and checked with the server's token logic (its
// SHA-256 looked up among the stored, unrevoked tokens; the role table of
// the gRPC methods). The browser then holds only a random session id in an
// HttpOnly, SameSite=Strict cookie (Secure under TLS) that expires; the
// session, kept in memory, holds the token's id and hash, never the token,
// and every request re-checks that the token is still valid.
//
// CSRF: the sign-in form is protected by a double-submitted random value (a
// cookie and a hidden field that must match), the sign-out form by a value
// kept in the session; both POSTs also refuse a foreign Origin.

import (
	"context"
	"crypto/rand"
	"crypto/subtle"
	"encoding/base64"
	"errors"
	"net/http"
	"net/url"
	"slices"
	"strings"
	"sync"
	"time"

	"github.com/nightloom/nightloom/internal/server"
	"github.com/nightloom/nightloom/internal/store"
	nightloomv1 "github.com/nightloom/nightloom/proto/nightloom/v1"
)

// Cookie names.
const (
	sessionCookie = "nightloom_session"
	csrfCookie    = "nightloom_csrf"
)

// session is one sign-in. It never holds the token itself.
type session struct {
	id        string
	tokenID   string
	tokenHash []byte
	role      server.Role
	csrf      string
	expires   time.Time
}

type sessions struct {
	mu sync.Mutex
	m  map[string]*session
}

func newSessions() *sessions { return &sessions{m: map[string]*session{}} }

func (s *sessions) put(x *session) {
	s.mu.Lock()
	defer s.mu.Unlock()
	s.m[x.id] = x
}

func (s *sessions) get(id string) *session {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.m[id]
}

func (s *sessions) drop(id string) {
	s.mu.Lock()
	defer s.mu.Unlock()
	delete(s.m, id)
}

// prune drops the expired sessions.
func (s *sessions) prune(now time.Time) {
	s.mu.Lock()
	defer s.mu.Unlock()
	for id, x := range s.m {
		if !now.Before(x.expires) {
			delete(s.m, id)
		}
	}
}

// randomID is 32 random bytes, unpadded base64url.
func randomID() string {
	var b [32]byte
	_, _ = rand.Read(b[:]) // crypto/rand.Read never fails (Go 1.24+)
	return base64.RawURLEncoding.EncodeToString(b[:])
}

// mayRead reports whether a role may see the pages: it must be allowed to
// read sites, plans and the sky (the gRPC method table decides).
func mayRead(role server.Role) bool {
	for _, m := range []string{
		nightloomv1.SiteService_GetSite_FullMethodName,
		nightloomv1.PlanService_GetPlan_FullMethodName,
		nightloomv1.SkyService_Night_FullMethodName,
	} {
		roles, _ := server.MethodRoles(m)
		if !slices.Contains(roles, role) {
			return false
		}
	}
	return true
}

// errNoSession: no valid session (none, expired, or its token revoked).
var errNoSession = errors.New("web: sign-in needed")

// current returns the request's valid session, re-checking its token.
func (h *Handler) current(ctx context.Context, r *http.Request) (*session, error) {
	c, err := r.Cookie(sessionCookie)
	if err != nil || c.Value == "" {
		return nil, errNoSession
	}
	x := h.sessions.get(c.Value)
	if x == nil {
		return nil, errNoSession
	}
	return x, h.check(ctx, x)
}

// check re-validates a session: not expired, token still stored and not
// revoked, role still allowed. An invalid session is dropped.
func (h *Handler) check(ctx context.Context, x *session) error {
	if !h.now().Before(x.expires) {
		h.sessions.drop(x.id)
		return errNoSession
	}
	rec, err := h.cfg.Store.TokenByHash(ctx, x.tokenHash)
	switch {
	case errors.Is(err, store.ErrNotFound):
		h.sessions.drop(x.id)
		h.log.Info("web session ended: token revoked", "token_id", x.tokenID)
		return errNoSession
	case err != nil:
		return err
	}
	if rec.ID != x.tokenID || !mayRead(server.Role(rec.Role)) {
		h.sessions.drop(x.id)
		return errNoSession
	}
	return nil
}

// auth wraps a page that needs a session.
func (h *Handler) auth(next http.HandlerFunc) http.HandlerFunc {
	return func(w http.ResponseWriter, r *http.Request) {
		x, err := h.current(r.Context(), r)
		if err != nil {
			h.needSignIn(w, r, err)
			return
		}
		next(w, r.WithContext(context.WithValue(r.Context(), sessionKey{}, x)))
	}
}

// authSite is auth, except for the public site's pages.
func (h *Handler) authSite(next http.HandlerFunc) http.HandlerFunc {
	signed := h.auth(next)
	return func(w http.ResponseWriter, r *http.Request) {
		if h.cfg.PublicSite != "" && r.PathValue("site") == h.cfg.PublicSite {
			if x, err := h.current(r.Context(), r); err == nil {
				r = r.WithContext(context.WithValue(r.Context(), sessionKey{}, x))
			}
			next(w, r)
			return
		}
		signed(w, r)
	}
}

type sessionKey struct{}

func sessionFrom(ctx context.Context) *session {
	x, _ := ctx.Value(sessionKey{}).(*session)
	return x
}

// needSignIn sends a page request to the sign-in form (with the page to
// come back to), and answers 401 to the live page's script and streams.
func (h *Handler) needSignIn(w http.ResponseWriter, r *http.Request, err error) {
	if !errors.Is(err, errNoSession) {
		h.log.Error("web session check failed", "err", err.Error())
		http.Error(w, "session check failed; try again", http.StatusServiceUnavailable)
		return
	}
	http.SetCookie(w, h.cookie(r, sessionCookie, "", -1))
	if r.URL.Query().Get("fragment") != "" || strings.HasSuffix(r.URL.Path, "/events") {
		w.Header().Set("X-Nightloom-Signin", "/signin")
		http.Error(w, "sign in again", http.StatusUnauthorized)
		return
	}
	http.Redirect(w, r, "/signin?next="+url.QueryEscape(r.URL.RequestURI()), http.StatusSeeOther)
}

// cookie makes a cookie with the flags every cookie here has: HttpOnly,
// SameSite=Strict, path /, Secure under TLS (Config.Secure, or a request
// that came over TLS). maxAge < 0 deletes it.
func (h *Handler) cookie(r *http.Request, name, value string, maxAge time.Duration) *http.Cookie {
	c := &http.Cookie{Name: name, Value: value, Path: "/", HttpOnly: true, Secure: h.cfg.Secure || r.TLS != nil,
		SameSite: http.SameSiteStrictMode}
	switch {
	case maxAge < 0:
		c.MaxAge = -1
	case maxAge > 0:
		c.MaxAge = int(maxAge / time.Second)
		c.Expires = h.now().Add(maxAge)
	}
	return c
}

// localPath keeps next only when it is a path on this site (no open
// redirect).
func localPath(next string) string {
	if next == "" || !strings.HasPrefix(next, "/") || strings.HasPrefix(next, "//") || strings.HasPrefix(next, "/\\") {
		return "/"
	}
	if u, err := url.Parse(next); err != nil || u.Host != "" || u.Scheme != "" {
		return "/"
	}
	return next
}

// sameOrigin refuses a POST whose Origin (when the browser sends one)
// names another host.
func sameOrigin(r *http.Request) bool {
	o := r.Header.Get("Origin")
	if o == "" {
		return true
	}
	u, err := url.Parse(o)
	return err == nil && u.Host == r.Host
}

type signInView struct {
	pageBase
	CSRF, Next, Error string
	Public            string
}

func (h *Handler) signInForm(w http.ResponseWriter, r *http.Request) {
	h.showSignIn(w, r, localPath(r.URL.Query().Get("next")), "", http.StatusOK)
}

func (h *Handler) showSignIn(w http.ResponseWriter, r *http.Request, next, msg string, code int) {
	tok := randomID()
	http.SetCookie(w, h.cookie(r, csrfCookie, tok, time.Hour))
	w.Header().Set("Cache-Control", "no-store")
	h.render(w, r, code, "signin", signInView{pageBase: pageBase{Title: "Sign in"}, CSRF: tok, Next: next, Error: msg,
		Public: h.cfg.PublicSite})
}

// maxTokenBytes bounds the token field (the gRPC side refuses longer ones
// too).
const maxTokenBytes = 512

func (h *Handler) signIn(w http.ResponseWriter, r *http.Request) {
	r.Body = http.MaxBytesReader(w, r.Body, 8<<10)
	if err := r.ParseForm(); err != nil {
		http.Error(w, "bad form", http.StatusBadRequest)
		return
	}
	next := localPath(r.PostFormValue("next"))
	c, err := r.Cookie(csrfCookie)
	if !sameOrigin(r) || err != nil || c.Value == "" ||
		subtle.ConstantTimeCompare([]byte(c.Value), []byte(r.PostFormValue("csrf"))) != 1 {
		h.log.Warn("web sign-in refused: CSRF check failed", "remote", r.RemoteAddr, "origin", r.Header.Get("Origin"), "host", r.Host, "cookie", err == nil)
		h.showSignIn(w, r, next, "The form had expired. Please sign in again.", http.StatusForbidden)
		return
	}
	tok := strings.TrimSpace(r.PostFormValue("token"))
	if tok == "" || len(tok) > maxTokenBytes {
		h.showSignIn(w, r, next, "Give a token.", http.StatusUnauthorized)
		return
	}
	hash := server.HashToken(tok)
	rec, err := h.cfg.Store.TokenByHash(r.Context(), hash)
	switch {
	case errors.Is(err, store.ErrNotFound):
		h.log.Info("web sign-in refused: unknown or revoked token", "remote", r.RemoteAddr)
		h.showSignIn(w, r, next, "Unknown or revoked token.", http.StatusUnauthorized)
		return
	case err != nil:
		h.log.Error("web sign-in: token check failed", "err", err.Error())
		h.showSignIn(w, r, next, "The token could not be checked; try again.", http.StatusServiceUnavailable)
		return
	}
	if rec.SiteID != "" {
		// The pages list every site; a token held to one site (issue 14)
		// is refused rather than shown what it may not see.
		h.log.Info("web sign-in refused: token held to one site", "token_id", rec.ID, "site_id", rec.SiteID)
		h.showSignIn(w, r, next, "This token is held to one site; the web pages need a token for every site.", http.StatusForbidden)
		return
	}
	if !mayRead(server.Role(rec.Role)) {
		h.log.Info("web sign-in refused: role may not read", "token_id", rec.ID, "role", rec.Role)
		h.showSignIn(w, r, next, "This token's role ("+rec.Role+") may not read sites and plans.", http.StatusForbidden)
		return
	}
	h.sessions.prune(h.now())
	x := &session{id: randomID(), tokenID: rec.ID, tokenHash: hash, role: server.Role(rec.Role), csrf: randomID(),
		expires: h.now().Add(h.cfg.SessionTTL)}
	h.sessions.put(x)
	h.log.Info("web sign-in", "token_id", rec.ID, "role", rec.Role)
	http.SetCookie(w, h.cookie(r, csrfCookie, "", -1))
	http.SetCookie(w, h.cookie(r, sessionCookie, x.id, h.cfg.SessionTTL))
	http.Redirect(w, r, next, http.StatusSeeOther)
}

func (h *Handler) signOut(w http.ResponseWriter, r *http.Request) {
	r.Body = http.MaxBytesReader(w, r.Body, 8<<10)
	if err := r.ParseForm(); err != nil {
		http.Error(w, "bad form", http.StatusBadRequest)
		return
	}
	c, err := r.Cookie(sessionCookie)
	if err != nil {
		http.Redirect(w, r, "/signin", http.StatusSeeOther)
		return
	}
	x := h.sessions.get(c.Value)
	if x == nil {
		http.SetCookie(w, h.cookie(r, sessionCookie, "", -1))
		http.Redirect(w, r, "/signin", http.StatusSeeOther)
		return
	}
	if !sameOrigin(r) || subtle.ConstantTimeCompare([]byte(x.csrf), []byte(r.PostFormValue("csrf"))) != 1 {
		h.log.Warn("web sign-out refused: CSRF check failed", "remote", r.RemoteAddr)
		http.Error(w, "forbidden", http.StatusForbidden)
		return
	}
	h.sessions.drop(x.id)
	h.log.Info("web sign-out", "token_id", x.tokenID)
	http.SetCookie(w, h.cookie(r, sessionCookie, "", -1))
	http.Redirect(w, r, "/signin", http.StatusSeeOther)
}
