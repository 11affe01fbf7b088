package web

import (
	"crypto/sha256"
	"crypto/subtle"
	"encoding/hex"
	"net/http"
	"strings"
)

// SessionCookie is the cookie the page's sign-in sets (POST /api/session).
// It holds a digest of the token, never the token itself, and is HttpOnly
// (the page's script cannot read it), SameSite=Strict (no other site's
// page can make the browser send it) and without an expiry, so the browser
// forgets it when it closes.
const SessionCookie = "residua_session"

// sessionValue is the cookie's content for a token: SHA-256 of a fixed
// label and the token, in hex. The cookie proves knowledge of the token
// without being the token, so it cannot be replayed as a bearer token to
// the gRPC service.
func sessionValue(token []byte) string {
	h := sha256.New()
	h.Write([]byte("residua watch page session\x00"))
	h.Write(token)
	return hex.EncodeToString(h.Sum(nil))
}

// bearer reports whether r carries "Authorization: Bearer <token>".
func bearer(r *http.Request, token []byte) bool {
	for _, v := range r.Header.Values("Authorization") {
		scheme, tok, ok := strings.Cut(v, " ")
		if ok && strings.EqualFold(scheme, "bearer") &&
			subtle.ConstantTimeCompare([]byte(strings.TrimSpace(tok)), token) == 1 {
			return true
		}
	}
	return false
}

// authorized reports whether r may read the protected endpoints: always
// without a token; otherwise with the bearer token or the session cookie.
func (s *Server) authorized(r *http.Request) bool {
	if s.opt.Token == nil || bearer(r, s.opt.Token) {
		return true
	}
	c, err := r.Cookie(SessionCookie)
	return err == nil && subtle.ConstantTimeCompare([]byte(c.Value), []byte(s.session)) == 1
}

// guard wraps a protected endpoint: without credentials it answers 401
// with a WWW-Authenticate challenge and says how to authenticate.
func (s *Server) guard(h http.Handler) http.Handler {
	return http.HandlerFunc(func(w http.ResponseWriter, r *http.Request) {
		if !s.authorized(r) {
			unauthorized(w)
			return
		}
		h.ServeHTTP(w, r)
	})
}

func unauthorized(w http.ResponseWriter) {
	w.Header().Set("WWW-Authenticate", `Bearer realm="residua"`)
	http.Error(w, "this server needs its token: send Authorization: Bearer <token>, or sign in on the page", http.StatusUnauthorized)
}

// signIn is POST /api/session: with the right bearer token it sets the
// session cookie (204), else 401. The page calls it once with the token
// typed in, and then forgets the token.
func (s *Server) signIn(w http.ResponseWriter, r *http.Request) {
	if s.opt.Token == nil {
		w.WriteHeader(http.StatusNoContent)
		return
	}
	if !bearer(r, s.opt.Token) {
		unauthorized(w)
		return
	}
	http.SetCookie(w, &http.Cookie{
		Name: SessionCookie, Value: s.session, Path: "/",
		HttpOnly: true, SameSite: http.SameSiteStrictMode, Secure: r.TLS != nil,
	})
	w.WriteHeader(http.StatusNoContent)
}
