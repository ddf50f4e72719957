package session

import "fmt"

// Wire types of the HTTP API. Field names are the API; change them only
// with a new version prefix.

// nextBody is the body of POST /v1/next, one entry of POST
// /v1/next/batch, and the request of the NATS endpoint waymark.api.next.
// Session names a tracked session; otherwise Items is the sequence.
type nextBody struct {
	Session string   `json:"session,omitempty"`
	Items   []string `json:"items"`
	K       *int     `json:"k"`
	Keep    bool     `json:"keep_session_items"`
	// Category restricts answers to a category path; Exclude leaves items
	// out.
	Category string   `json:"category,omitempty"`
	Exclude  []string `json:"exclude,omitempty"`
	// Context keys choose the popularity an empty session gets.
	Context []string `json:"context,omitempty"`
	// Prefer holds what a visitor declared at a first visit.
	Prefer *preferBody `json:"prefer,omitempty"`
	// TimeoutMS is the query's latency budget in milliseconds.
	TimeoutMS int `json:"timeout_ms,omitempty"`
}

type preferBody struct {
	Items      []string `json:"items"`
	Categories []string `json:"categories"`
}

// batchBody is the body of POST /v1/next/batch and /v1/score/batch:
// {"requests":[...]} of the single bodies.
type batchBody[Req any] struct {
	Requests []Req `json:"requests"`
}

type (
	nextBatchBody  = batchBody[nextBody]
	scoreBatchBody = batchBody[scoreBody]
)

// batchEntry is one answer of a batch: the result or an error.
type batchEntry struct {
	Result any       `json:"result,omitempty"`
	Error  *apiError `json:"error,omitempty"`
}

type batchReply struct {
	Results []batchEntry `json:"results"`
}

// scoreBody is the body of POST /v1/score.
type scoreBody struct {
	Items      []string `json:"items"`
	Candidates []string `json:"candidates"`
}

// ingestReply answers POST /v1/events and POST /v1/items.
type ingestReply struct {
	Accepted int          `json:"accepted"`
	Rejected int          `json:"rejected"`
	Errors   []lineReport `json:"errors"`
	Error    *apiError    `json:"error,omitempty"`
}

type lineReport struct {
	Line    int    `json:"line"`
	Message string `json:"message"`
}

type neighborsReply struct {
	Item      string     `json:"item"`
	Known     bool       `json:"known"`
	Neighbors []Neighbor `json:"neighbors"`
}

type popularReply struct {
	Items []PopularItem `json:"items"`
}

// forgetReply answers DELETE /v1/sessions/{id}: Seq is the log position
// at which every replica forgets the session.
type forgetReply struct {
	Session string `json:"session"`
	Seq     uint64 `json:"seq,omitempty"`
	Tracked bool   `json:"tracked,omitempty"`
}

// errorReply is every error body: {"error":{"code":"...","message":"..."}}.
type errorReply struct {
	Error apiError `json:"error"`
}

type apiError struct {
	Code    string `json:"code"`
	Message string `json:"message"`
	status  int
}

func badParam(format string, a ...any) *apiError {
	return &apiError{Code: CodeInvalidParam, Message: fmt.Sprintf(format, a...), status: 400}
}

// Error codes of the HTTP API, stable for clients to branch on.
const (
	// CodeInvalidJSON: the body is not the JSON the endpoint takes (400).
	CodeInvalidJSON = "invalid_json"
	// CodeInvalidParam: a parameter is out of range or malformed, for
	// example k outside 1..1000 (400).
	CodeInvalidParam = "invalid_parameter"
	// CodeInvalidEvents: every event or record of a batch was rejected (400).
	CodeInvalidEvents = "invalid_events"
	// CodeUnauthorized: a write or admin request without the bearer
	// token the server was started with (401).
	CodeUnauthorized = "unauthorized"
	// CodeBodyTooLarge: the body exceeds the 10 MiB limit (413).
	CodeBodyTooLarge = "body_too_large"
	// CodeNotFound: no such route (404).
	CodeNotFound = "not_found"
	// CodeMethodNotAllowed: the route exists with another method (405).
	CodeMethodNotAllowed = "method_not_allowed"
	// CodeUnavailable: the bus did not take the write, or the service is
	// not ready (503).
	CodeUnavailable = "unavailable"
	// CodeInternal: a bug; the message says what failed (500).
	CodeInternal = "internal"
)
