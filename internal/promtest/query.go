package promtest

import (
	"encoding/json"
	"fmt"
	"io"
	"net/http"
	"net/url"
	"testing"
	"time"
)

// Sample is one element of an instant-query vector result.
type Sample struct {
	Metric map[string]string
	Value  string // the sample value as Prometheus formats it
}

// Query runs an instant PromQL query against the Prometheus at baseURL and
// returns its vector result, failing the test on any error.
func Query(t testing.TB, baseURL, query string) []Sample {
	t.Helper()
	samples, err := queryOnce(baseURL, query)
	if err != nil {
		t.Fatalf("promtest: query %q: %v", query, err)
	}
	return samples
}

// WaitForQuery polls the query until it returns at least one sample and
// returns them, failing the test when timeout passes first.
func WaitForQuery(t testing.TB, baseURL, query string, timeout time.Duration) []Sample {
	t.Helper()
	deadline := time.NewTimer(timeout)
	defer deadline.Stop()
	tick := time.NewTicker(200 * time.Millisecond)
	defer tick.Stop()
	for {
		samples, err := queryOnce(baseURL, query)
		if err == nil && len(samples) > 0 {
			return samples
		}
		select {
		case <-deadline.C:
			t.Fatalf("promtest: query %q returned nothing within %s (last error: %v)", query, timeout, err)
			return nil
		case <-tick.C:
		}
	}
}

func queryOnce(baseURL, query string) ([]Sample, error) {
	client := &http.Client{Timeout: 5 * time.Second}
	resp, err := client.Get(baseURL + "/api/v1/query?query=" + url.QueryEscape(query))
	if err != nil {
		return nil, err
	}
	defer resp.Body.Close()
	body, err := io.ReadAll(resp.Body)
	if err != nil {
		return nil, err
	}
	var out struct {
		Status string `json:"status"`
		Error  string `json:"error"`
		Data   struct {
			ResultType string `json:"resultType"`
			Result     []struct {
				Metric map[string]string `json:"metric"`
				Value  [2]any            `json:"value"`
			} `json:"result"`
		} `json:"data"`
	}
	if err := json.Unmarshal(body, &out); err != nil {
		return nil, fmt.Errorf("%s: %w: %.200s", resp.Status, err, body)
	}
	if out.Status != "success" {
		return nil, fmt.Errorf("%s: %s", resp.Status, out.Error)
	}
	if out.Data.ResultType != "vector" {
		return nil, fmt.Errorf("result type %q, want vector", out.Data.ResultType)
	}
	samples := make([]Sample, 0, len(out.Data.Result))
	for _, r := range out.Data.Result {
		v, _ := r.Value[1].(string)
		samples = append(samples, Sample{Metric: r.Metric, Value: v})
	}
	return samples, nil
}
