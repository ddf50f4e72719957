package session

import (
	"net/http"
	"strings"
)

// probeMethods are the methods noRoute tries on a path to tell a wrong
// method from a wrong path.
var probeMethods = []string{http.MethodGet, http.MethodHead, http.MethodPost, http.MethodPut,
	http.MethodPatch, http.MethodDelete, http.MethodOptions}

// noRoute answers a request no route took: 405 with an Allow header when
// the path has routes for other methods (RFC 9110, section 15.5.6), else
// 404, both with the API's JSON error body. The mux would answer 405 by
// itself, in plain text, but the catch-all route that gives 404s their
// JSON body matches every method and so hides it.
func (s *Server) noRoute(w http.ResponseWriter, r *http.Request) {
	var allow []string
	probe := *r
	for _, m := range probeMethods {
		probe.Method = m
		if _, pattern := s.mux.Handler(&probe); pattern != "" && pattern != catchAll {
			allow = append(allow, m)
		}
	}
	if len(allow) == 0 {
		writeError(w, http.StatusNotFound, CodeNotFound, "no route "+echo(r.Method)+" "+echo(r.URL.Path))
		return
	}
	w.Header().Set("Allow", strings.Join(allow, ", "))
	writeError(w, http.StatusMethodNotAllowed, CodeMethodNotAllowed,
		echo(r.URL.Path)+" takes "+strings.Join(allow, ", ")+", not "+echo(r.Method))
}

// catchAll is the pattern of noRoute.
const catchAll = "/"
