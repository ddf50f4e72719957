package session

import (
	"encoding/json"
	"fmt"
	"strconv"

	"github.com/nats-io/nats.go"
	"github.com/nats-io/nats.go/micro"
)

// NATSSubjectPrefix prefixes the request/reply endpoints: waymark.api.next,
// waymark.api.score and waymark.api.stats. Requests and replies are the
// JSON bodies of the HTTP API.
const NATSSubjectPrefix = "waymark.api"

// AddNATSService registers the query API as a NATS micro service named
// "waymark", so services that live on the bus can query it and discover its
// instances and stats. Replicas join one queue group: each request is
// answered once.
func (s *Server) AddNATSService(nc *nats.Conn, version string) (micro.Service, error) {
	svc, err := micro.AddService(nc, micro.Config{
		Name:        "waymark",
		Version:     version,
		Description: "next-item recommendations from a session's own clicks",
	})
	if err != nil {
		return nil, fmt.Errorf("nats service: %w", err)
	}
	g := svc.AddGroup(NATSSubjectPrefix)
	endpoints := []struct {
		name string
		h    micro.HandlerFunc
	}{
		{"next", func(r micro.Request) {
			var b nextBody
			if !decodeNATS(r, &b) {
				return
			}
			res, aerr := s.doNext(b)
			respondNATS(r, res, aerr)
		}},
		{"score", func(r micro.Request) {
			var b scoreBody
			if !decodeNATS(r, &b) {
				return
			}
			res, aerr := s.doScore(b)
			respondNATS(r, res, aerr)
		}},
		{"stats", func(r micro.Request) { respondNATS(r, s.eng.Stats(), nil) }},
	}
	for _, e := range endpoints {
		if err := g.AddEndpoint(e.name, e.h); err != nil {
			_ = svc.Stop()
			return nil, fmt.Errorf("nats endpoint %s: %w", e.name, err)
		}
	}
	return svc, nil
}

func decodeNATS(r micro.Request, v any) bool {
	if len(r.Data()) > int(10<<20) {
		respondNATS(r, nil, &apiError{Code: CodeBodyTooLarge, Message: "request exceeds 10 MiB", status: 413})
		return false
	}
	if err := unmarshalBody(r.Data(), v); err != nil {
		respondNATS(r, nil, &apiError{Code: CodeInvalidJSON, Message: "body: " + err.Error(), status: 400})
		return false
	}
	return true
}

// respondNATS answers with the result, or with a micro error whose code is
// the HTTP status and whose data is the HTTP API's error body.
func respondNATS(r micro.Request, res any, aerr *apiError) {
	if aerr != nil {
		body, _ := json.Marshal(errorReply{Error: *aerr})
		_ = r.Error(strconv.Itoa(aerr.status), aerr.Message, body)
		return
	}
	_ = r.RespondJSON(res)
}
