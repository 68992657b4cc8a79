package server_test

import (
	"context"
	"net/http"
	"os"
	"path/filepath"
	"testing"
	"time"

	"golang.org/x/crypto/bcrypt"

	"github.com/aftercast/aftercast/server"
	"github.com/aftercast/aftercast/server/store/storetest"
)

// --web.config.file (exporter-toolkit) puts basic auth in front of the
// HTTP listener, /metrics and the status page alike.
func TestWebConfigBasicAuth(t *testing.T) {
	t.Parallel()
	hash, err := bcrypt.GenerateFromPassword([]byte("s3cret"), bcrypt.MinCost)
	if err != nil {
		t.Fatal(err)
	}
	cfgPath := filepath.Join(t.TempDir(), "web.yml")
	if err := os.WriteFile(cfgPath, []byte("basic_auth_users:\n  ops: "+string(hash)+"\n"), 0o600); err != nil {
		t.Fatal(err)
	}
	srv, err := server.New(server.Config{Listen: "127.0.0.1:0", MetricsListen: "127.0.0.1:0", DatabaseURL: storetest.URL(t),
		WebConfigFile: cfgPath, Logger: storetest.Logger(t)})
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()
	if err := srv.Start(ctx); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = srv.Stop(context.Background()) })
	get := func(user, pass string) int {
		req, _ := http.NewRequestWithContext(ctx, http.MethodGet, "http://"+srv.MetricsAddr()+"/metrics", nil)
		if user != "" {
			req.SetBasicAuth(user, pass)
		}
		resp, err := http.DefaultClient.Do(req)
		if err != nil {
			t.Fatal(err)
		}
		resp.Body.Close()
		return resp.StatusCode
	}
	if code := get("", ""); code != http.StatusUnauthorized {
		t.Errorf("no credentials: %d, want 401", code)
	}
	if code := get("ops", "wrong"); code != http.StatusUnauthorized {
		t.Errorf("wrong password: %d, want 401", code)
	}
	if code := get("ops", "s3cret"); code != http.StatusOK {
		t.Errorf("right password: %d, want 200", code)
	}
}
