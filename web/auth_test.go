package web

import (
	"net/http"
	"strings"
	"testing"

	"github.com/residua/residua/metrics"
)

// TestTokenRequired (issue 15, finding 4): with a token, every endpoint
// that shows jobs, labels, matrix names, histories or metrics answers 401
// without credentials, and 200 with the bearer token or with the session
// cookie that the sign-in sets; the page shell and the sign-in stay open.
// The challenge follows RFC 6750 §3 (WWW-Authenticate: Bearer).
func TestTokenRequired(t *testing.T) {
	t.Parallel()
	const token = "s3cret-for-the-test"
	_, ts := fixture(t, Options{Token: []byte(token), Metrics: metrics.New()})
	protected := []string{"/api/jobs", "/api/jobs/jb", "/api/jobs/jb/history", "/api/jobs/jb/history?format=csv",
		"/api/jobs/jb/chart.svg", "/metrics"}
	get := func(path string, set func(*http.Request)) *http.Response {
		t.Helper()
		req, _ := http.NewRequest(http.MethodGet, ts.URL+path, nil)
		if set != nil {
			set(req)
		}
		res, err := http.DefaultClient.Do(req)
		if err != nil {
			t.Fatal(err)
		}
		res.Body.Close()
		return res
	}
	for _, p := range protected {
		res := get(p, nil)
		if res.StatusCode != http.StatusUnauthorized || !strings.HasPrefix(res.Header.Get("WWW-Authenticate"), "Bearer") {
			t.Errorf("GET %s without credentials: %d %q, want 401 with a Bearer challenge", p, res.StatusCode, res.Header.Get("WWW-Authenticate"))
		}
		if res := get(p, func(r *http.Request) { r.Header.Set("Authorization", "Bearer wrong") }); res.StatusCode != http.StatusUnauthorized {
			t.Errorf("GET %s with a wrong token: %d, want 401", p, res.StatusCode)
		}
		if res := get(p, func(r *http.Request) { r.Header.Set("Authorization", "Bearer "+token) }); res.StatusCode != http.StatusOK {
			t.Errorf("GET %s with the token: %d, want 200", p, res.StatusCode)
		}
	}
	// The event stream is protected too (checked without reading it).
	if res := get("/api/events", nil); res.StatusCode != http.StatusUnauthorized {
		t.Errorf("GET /api/events without credentials: %d, want 401", res.StatusCode)
	}
	for _, p := range []string{"/", "/static/app.js"} {
		if res := get(p, nil); res.StatusCode != http.StatusOK {
			t.Errorf("GET %s (open): %d, want 200", p, res.StatusCode)
		}
	}

	// Sign-in: a wrong token sets nothing; the right one sets an HttpOnly,
	// SameSite=Strict cookie that is not the token.
	post := func(tok string) *http.Response {
		req, _ := http.NewRequest(http.MethodPost, ts.URL+"/api/session", nil)
		req.Header.Set("Authorization", "Bearer "+tok)
		res, err := http.DefaultClient.Do(req)
		if err != nil {
			t.Fatal(err)
		}
		res.Body.Close()
		return res
	}
	if res := post("wrong"); res.StatusCode != http.StatusUnauthorized || len(res.Cookies()) != 0 {
		t.Errorf("sign-in with a wrong token: %d, cookies %v", res.StatusCode, res.Cookies())
	}
	res := post(token)
	var c *http.Cookie
	for _, k := range res.Cookies() {
		if k.Name == SessionCookie {
			c = k
		}
	}
	if res.StatusCode != http.StatusNoContent || c == nil {
		t.Fatalf("sign-in: %d, cookies %v", res.StatusCode, res.Cookies())
	}
	if !c.HttpOnly || c.SameSite != http.SameSiteStrictMode || strings.Contains(c.Value, token) || c.Expires.Unix() > 0 {
		t.Errorf("session cookie %+v: want HttpOnly, SameSite=Strict, a session cookie, not the token", c)
	}
	for _, p := range protected {
		if res := get(p, func(r *http.Request) { r.AddCookie(c) }); res.StatusCode != http.StatusOK {
			t.Errorf("GET %s with the session cookie: %d, want 200", p, res.StatusCode)
		}
	}
	forged := &http.Cookie{Name: SessionCookie, Value: strings.Repeat("0", 64)}
	if res := get("/api/jobs", func(r *http.Request) { r.AddCookie(forged) }); res.StatusCode != http.StatusUnauthorized {
		t.Errorf("GET /api/jobs with a forged cookie: %d, want 401", res.StatusCode)
	}
}
