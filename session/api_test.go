package session

import (
	"context"
	"encoding/json"
	"net/http"
	"strings"
	"testing"
	"time"
)

// TestBatchNATSAndAuth checks the batch endpoints, the NATS request/reply
// service and the bearer token on writes, on the hand-computed scenario of
// workedEvents (B follows A, C follows B).
func TestBatchNATSAndAuth(t *testing.T) {
	s := newTestService(t, t.TempDir(), func(o *ServiceOptions) { o.Token = "s3cret" })
	defer shutdown(t, s)
	base := "http://" + s.HTTPAddr()

	// Writes need the token.
	if code := doJSON(t, "POST", base+"/v1/events", workedEvents(), nil); code != http.StatusUnauthorized {
		t.Fatalf("POST /v1/events without a token: %d, want 401", code)
	}
	req, _ := http.NewRequest("POST", base+"/v1/events", strings.NewReader(workedEvents()))
	req.Header.Set("Authorization", "Bearer s3cret")
	resp, err := http.DefaultClient.Do(req)
	if err != nil || resp.StatusCode != 200 {
		t.Fatalf("POST /v1/events with the token: %v %v", resp, err)
	}
	resp.Body.Close()
	waitFor(t, "events applied", 20*time.Second, func() bool { return s.Engine().Stats().EventsApplied == 171 })

	var batch struct {
		Results []struct {
			Result *NextResult `json:"result"`
			Error  *apiError   `json:"error"`
		} `json:"results"`
	}
	body := `{"requests":[{"items":["A"],"k":3},{"session":"q1","k":2},{"items":["B"],"k":0}]}`
	if code := doJSON(t, "POST", base+"/v1/next/batch", body, &batch); code != 200 || len(batch.Results) != 3 {
		t.Fatalf("batch: %d %+v", code, batch)
	}
	if r := batch.Results[0].Result; r == nil || r.Items[0].Item != "B" {
		t.Errorf("batch[0]: %+v", batch.Results[0])
	}
	if r := batch.Results[1].Result; r == nil || !r.Tracked || r.Items[0].Item != "B" {
		t.Errorf("batch[1]: %+v", batch.Results[1])
	}
	if e := batch.Results[2].Error; e == nil || e.Code != CodeInvalidParam {
		t.Errorf("batch[2] with k=0 should be an invalid_parameter error: %+v", batch.Results[2])
	}
	var sb struct {
		Results []struct {
			Result *ScoreResult `json:"result"`
		} `json:"results"`
	}
	doJSON(t, "POST", base+"/v1/score/batch", `{"requests":[{"items":["A"],"candidates":["D","B"]}]}`, &sb)
	if r := sb.Results[0].Result; r == nil || len(r.Candidates) != 2 || r.Candidates[1].Score <= r.Candidates[0].Score {
		t.Errorf("score batch: %+v", sb.Results)
	}

	// The same query over NATS request/reply.
	nc := s.Bus().Conn()
	msg, err := nc.Request(NATSSubjectPrefix+".next", []byte(`{"items":["B"],"k":3}`), 5*time.Second)
	if err != nil {
		t.Fatal(err)
	}
	var nr NextResult
	if err := json.Unmarshal(msg.Data, &nr); err != nil || len(nr.Items) == 0 || nr.Items[0].Item != "C" {
		t.Fatalf("NATS next: %s %v", msg.Data, err)
	}
	msg, err = nc.Request(NATSSubjectPrefix+".next", []byte(`{"items":["B"],"k":-1}`), 5*time.Second)
	if err != nil {
		t.Fatal(err)
	}
	if msg.Header.Get("Nats-Service-Error-Code") != "400" {
		t.Fatalf("NATS next with k=-1: headers %v body %s", msg.Header, msg.Data)
	}
	// Service discovery sees the instance.
	ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
	defer cancel()
	sub, err := nc.SubscribeSync(nc.NewRespInbox())
	if err != nil {
		t.Fatal(err)
	}
	if err := nc.PublishRequest("$SRV.PING.waymark", sub.Subject, nil); err != nil {
		t.Fatal(err)
	}
	if _, err := sub.NextMsgWithContext(ctx); err != nil {
		t.Fatalf("no answer to a service discovery ping: %v", err)
	}
}
