package main

import (
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"fmt"
	"io"
	"math/rand/v2"
	"net/http"
	"os"
	"os/exec"
	"strconv"
	"strings"
	"sync"
	"sync/atomic"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"
	"golang.org/x/mod/sumdb/tlog"

	"beamledger/accounts"
	"beamledger/provenance"
	"beamledger/scheduling"
	"beamledger/storage/objects/objectstest"
	"beamledger/storage/postgres"
	"beamledger/storage/postgres/pgtest"
)

// cluster is three `beamledger serve` processes over one PostgreSQL database and
// one S3 bucket, as a facility runs them behind a load balancer.
type cluster struct {
	t      testing.TB
	db     *postgres.DB
	sql    *pgx.Conn // for checks from outside the server, from the test's goroutine only
	url    string
	env    []string
	procs  []*serveProcess
	instrs []string
	// researchers, each with their own project, qualified on every instrument.
	researchers []clusterUser
	auditor     string // access token
	manager     string // access token
	staffID     string
}

type clusterUser struct {
	id, token, project string
}

const clusterPassword = "three processes, one ledger"

func newCluster(t testing.TB, extraEnv ...string) *cluster {
	t.Helper()
	ctx := context.Background()
	c := &cluster{t: t, url: pgtest.NewDatabase(t)}
	db, err := postgres.Open(ctx, c.url, 4)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(db.Close)
	c.db = db
	if c.sql, err = pgx.Connect(ctx, c.url); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { c.sql.Close(context.Background()) })
	if _, err := db.SetFacility(ctx, scheduling.Facility{Name: "Cluster Facility", TimeZone: "Europe/Vienna", Currency: "EUR"}); err != nil {
		t.Fatal(err)
	}
	every := scheduling.ClockWindow{Start: "00:00", End: "00:00"}
	horizon, maxLen, lead := 400, 24*60, 0
	if err := db.SetFacilityRules(ctx, scheduling.RulesOverride{OpeningHours: []scheduling.ClockWindow{every},
		PrimeTime: []scheduling.ClockWindow{}, HorizonDays: &horizon, MaxLengthMinutes: &maxLen, LeadTimeMinutes: &lead}); err != nil {
		t.Fatal(err)
	}
	hash, err := accounts.NewPasswordHasher(accounts.DefaultPasswordParams(), 1).Hash(ctx, clusterPassword)
	if err != nil {
		t.Fatal(err)
	}
	staff, err := db.CreateUser(ctx, accounts.NewUser{Email: "staff@cluster.example", DisplayName: "Staff", Role: accounts.RoleStaff}, hash)
	if err != nil {
		t.Fatal(err)
	}
	c.staffID = staff.ID
	if _, err := db.CreateUser(ctx, accounts.NewUser{Email: "auditor@cluster.example", DisplayName: "Auditor", Role: accounts.RoleAuditor}, hash); err != nil {
		t.Fatal(err)
	}
	if _, err := db.CreateUser(ctx, accounts.NewUser{Email: "manager@cluster.example", DisplayName: "Manager", Role: accounts.RoleManager}, hash); err != nil {
		t.Fatal(err)
	}
	for i := range 2 {
		in, err := db.CreateInstrument(ctx, scheduling.Instrument{Code: fmt.Sprintf("CL-%d", i), Name: "Cluster TEM", Kind: scheduling.KindTEM,
			Bookable: true, Corrector: scheduling.CorrectorNone}, "setup", time.Now())
		if err != nil {
			t.Fatal(err)
		}
		c.instrs = append(c.instrs, in.ID)
	}
	var emails []string
	for i := range 6 {
		email := fmt.Sprintf("r%d@cluster.example", i)
		u, err := db.CreateUser(ctx, accounts.NewUser{Email: email, DisplayName: email, Role: accounts.RoleResearcher}, hash)
		if err != nil {
			t.Fatal(err)
		}
		p, err := db.CreateProject(ctx, accounts.NewProject{Code: fmt.Sprintf("CL-P%d", i), Title: "Cluster", PrincipalInvestigatorID: u.ID, RateClass: accounts.RateInternal})
		if err != nil {
			t.Fatal(err)
		}
		for _, in := range c.instrs {
			if _, err := db.GrantQualification(ctx, scheduling.NewQualification{UserID: u.ID, InstrumentID: in, Level: scheduling.LevelIndependent,
				Reason: "cluster test", GrantedBy: staff.ID}, time.Now()); err != nil {
				t.Fatal(err)
			}
		}
		emails = append(emails, email)
		c.researchers = append(c.researchers, clusterUser{id: u.ID, project: p.ID})
	}

	bin := buildBinary(t)
	c.env = append(serveEnv(c.url, objectstest.Config(t)), extraEnv...)
	for range 3 {
		c.procs = append(c.procs, startServe(t, bin, c.env))
	}
	for i, email := range emails {
		c.researchers[i].token = login(t, c.base(i), email, clusterPassword)
	}
	c.auditor = login(t, c.base(2), "auditor@cluster.example", clusterPassword)
	c.manager = login(t, c.base(1), "manager@cluster.example", clusterPassword)
	return c
}

// base is the address of process i mod 3.
func (c *cluster) base(i int) string { return "http://" + c.procs[i%len(c.procs)].addr }

// call sends a request to process i and returns the status and body.
func (c *cluster) call(i int, method, path, token string, body io.Reader, header map[string]string) (int, []byte, http.Header, error) {
	req, err := http.NewRequest(method, c.base(i)+path, body)
	if err != nil {
		return 0, nil, nil, err
	}
	if token != "" {
		req.Header.Set("Authorization", "Bearer "+token)
	}
	for k, v := range header {
		req.Header.Set(k, v)
	}
	res, err := http.DefaultClient.Do(req)
	if err != nil {
		return 0, nil, nil, err
	}
	defer res.Body.Close()
	b, err := io.ReadAll(res.Body)
	return res.StatusCode, b, res.Header, err
}

func (c *cluster) postJSON(i int, path, token string, v any) (int, []byte, error) {
	b, _ := json.Marshal(v)
	st, body, _, err := c.call(i, http.MethodPost, path, token, bytes.NewReader(b), map[string]string{"Content-Type": "application/json"})
	return st, body, err
}

// TestThreeProcesses drives three server processes at once over one database and
// one S3 server: researchers race for overlapping instrument time, create
// specimens and upload files whose requests hop between processes, while every
// process seals the ledger and sweeps abandoned uploads. Afterwards: no two active
// bookings overlap and every refusal was a conflict; the ledger has one event per
// change, indexes 0..n-1 with no gap, every event's inclusion proof (served by one
// process) checks against the checkpoint signed by another, every checkpoint is
// consistent with the last, and `ledger verify` finds nothing; each abandoned upload
// was swept by exactly one process; and no process logged an error.
func TestThreeProcesses(t *testing.T) {
	if testing.Short() {
		t.Skip("builds the binary and runs three processes against PostgreSQL and S3")
	}
	c := newCluster(t, "BEAMLEDGER_LEDGER_SEAL_INTERVAL=200ms", "BEAMLEDGER_UPLOAD_EXPIRY=4s", "BEAMLEDGER_JOB_INTERVAL=300ms")
	ctx := context.Background()

	const workers, attempts = 24, 12
	var created, conflicts, specimens atomic.Int64
	var wg sync.WaitGroup
	errs := make(chan error, workers*attempts)
	base := time.Now().UTC().Truncate(time.Hour).Add(48 * time.Hour)
	for w := range workers {
		wg.Add(1)
		go func() {
			defer wg.Done()
			r := rand.New(rand.NewPCG(uint64(w), 3))
			u := c.researchers[w%len(c.researchers)]
			for a := range attempts {
				proc := r.IntN(3)
				// About 2 days of quarter-hours on two instruments, 1–3 h long:
				// 288 attempts collide often.
				start := base.Add(time.Duration(r.IntN(2*96)) * 15 * time.Minute)
				end := start.Add(time.Duration(1+r.IntN(3)) * time.Hour)
				st, body, err := c.postJSON(proc, "/api/v1/bookings", u.token, map[string]string{
					"instrument_id": c.instrs[r.IntN(len(c.instrs))], "project_id": u.project, "kind": "independent",
					"start": start.Format(time.RFC3339), "end": end.Format(time.RFC3339)})
				switch {
				case err != nil:
					errs <- err
				case st == http.StatusCreated:
					created.Add(1)
				case st == http.StatusConflict:
					conflicts.Add(1)
				default:
					errs <- fmt.Errorf("booking on process %d: status %d: %s", proc, st, body)
				}
				if a%4 == 0 {
					st, body, err := c.postJSON(r.IntN(3), "/api/v1/specimens", u.token, map[string]string{
						"project_id": u.project, "code": fmt.Sprintf("W%d-A%d", w, a)})
					switch {
					case err != nil:
						errs <- err
					case st != http.StatusCreated:
						errs <- fmt.Errorf("specimen: status %d: %s", st, body)
					default:
						specimens.Add(1)
					}
				}
			}
		}()
	}
	// Uploads whose creation, halves and completion land on different processes,
	// two of them of the same bytes at once.
	var files atomic.Int64
	for f := range 6 {
		wg.Add(1)
		go func() {
			defer wg.Done()
			data := testPattern(3<<20 + 1000*(f%5))
			if err := c.hopUpload(f, c.researchers[f], data); err != nil {
				errs <- err
				return
			}
			files.Add(1)
		}()
	}
	wg.Wait()
	close(errs)
	for err := range errs {
		t.Error(err)
	}
	if t.Failed() {
		t.FailNow()
	}
	if created.Load() == 0 || conflicts.Load() == 0 {
		t.Fatalf("created %d, conflicts %d: the race needs both", created.Load(), conflicts.Load())
	}
	t.Logf("figure: three processes: %d bookings created and %d refused as conflicts with zero overlaps; %d specimens; %d uploads hopping between processes", created.Load(), conflicts.Load(), specimens.Load(), files.Load())

	// Zero overlaps, and exactly the bookings answered 201 exist.
	var active, overlaps int64
	if err := c.sql.QueryRow(ctx, `SELECT count(*) FROM bookings WHERE status = 'active'`).Scan(&active); err != nil {
		t.Fatal(err)
	}
	if err := c.sql.QueryRow(ctx, `SELECT count(*) FROM bookings a JOIN bookings b
		ON a.instrument_id = b.instrument_id AND a.id < b.id AND a.during && b.during
		WHERE a.status = 'active' AND b.status = 'active'`).Scan(&overlaps); err != nil {
		t.Fatal(err)
	}
	if active != created.Load() || overlaps != 0 {
		t.Errorf("active bookings %d (answered 201: %d), overlapping pairs %d", active, created.Load(), overlaps)
	}

	c.checkLedger(ctx, created.Load()+specimens.Load())
	c.checkSweptOnce()
	c.checkNoShowsOnce(ctx)
	c.checkCharges(ctx)
	for i, p := range c.procs {
		for _, line := range p.logLines() {
			var l struct{ Level string }
			if json.Unmarshal([]byte(line), &l) == nil && (l.Level == "ERROR" || l.Level == "WARN") {
				t.Errorf("process %d logged: %s", i, line)
			}
		}
	}
}

// hopUpload uploads data with tus: created on one process, the first half sent to
// the next, the rest to the third; then it checks the stored record.
func (c *cluster) hopUpload(f int, u clusterUser, data []byte) error {
	tus := map[string]string{"Tus-Resumable": "1.0.0"}
	st, body, h, err := c.call(f, http.MethodPost, "/api/v1/uploads", u.token, nil, map[string]string{
		"Tus-Resumable": "1.0.0", "Upload-Length": strconv.Itoa(len(data)),
		"Upload-Metadata": "filename " + b64(fmt.Sprintf("hop-%d.raw", f)) + ",project_id " + b64(u.project)})
	if err != nil || st != http.StatusCreated {
		return fmt.Errorf("upload %d: create: %d %v %s", f, st, err, body)
	}
	loc, fileID := h.Get("Location"), h.Get("Data-File-Id")
	half := len(data) / 2
	for k, part := range [][]byte{data[:half], data[half:]} {
		hdr := map[string]string{"Content-Type": "application/offset+octet-stream", "Upload-Offset": strconv.Itoa(k * half)}
		for key, v := range tus {
			hdr[key] = v
		}
		st, body, _, err := c.call(f+1+k, http.MethodPatch, loc, u.token, bytes.NewReader(part), hdr)
		if err != nil || st != http.StatusNoContent {
			return fmt.Errorf("upload %d: PATCH %d on process %d: %d %v %s", f, k, (f+1+k)%3, st, err, body)
		}
	}
	var rec struct {
		SHA256, Status string
		SizeBytes      int64 `json:"size_bytes"`
	}
	st, body, _, err = c.call(f+2, http.MethodGet, "/api/v1/files/"+fileID, u.token, nil, nil)
	if err != nil || st != http.StatusOK || json.Unmarshal(body, &rec) != nil {
		return fmt.Errorf("upload %d: record: %d %v %s", f, st, err, body)
	}
	sum := sha256.Sum256(data)
	if rec.Status != string(provenance.FileStored) || rec.SHA256 != hex.EncodeToString(sum[:]) || rec.SizeBytes != int64(len(data)) {
		return fmt.Errorf("upload %d: record %+v, want stored %x of %d bytes", f, rec, sum, len(data))
	}
	return nil
}

// checkLedger waits until every process reports the ledger fully sealed, then
// checks it from outside: indexes without gaps, one event per change counted by the
// clients at least, every inclusion proof against a checkpoint another process
// signed, every checkpoint consistent with the newest, and `ledger verify`.
func (c *cluster) checkLedger(ctx context.Context, atLeast int64) {
	t := c.t
	var head struct {
		Size     int64
		Unsealed int64
	}
	waitFor(t, 30*time.Second, "the ledger sealed", func() bool {
		for i := range c.procs {
			st, body, _, err := c.call(i, http.MethodGet, "/api/v1/ledger", "", nil, nil)
			if err != nil || st != http.StatusOK || json.Unmarshal(body, &head) != nil || head.Unsealed != 0 {
				return false
			}
		}
		return true
	})
	var n, lo, hi, unsealed int64
	if err := c.sql.QueryRow(ctx, `SELECT count(idx), coalesce(min(idx), -1), coalesce(max(idx), -1), count(*) - count(idx) FROM ledger_events`).
		Scan(&n, &lo, &hi, &unsealed); err != nil {
		t.Fatal(err)
	}
	if n != head.Size || lo != 0 || hi != n-1 || unsealed != 0 {
		t.Fatalf("ledger: %d sealed events, indexes %d..%d, %d unsealed; head size %d", n, lo, hi, unsealed, head.Size)
	}
	if n < atLeast {
		t.Fatalf("ledger holds %d events, fewer than the %d changes the clients saw succeed", n, atLeast)
	}

	// The key and the checkpoint from process 0; proofs and events from the others.
	_, vkey, _, _ := c.call(0, http.MethodGet, "/api/v1/ledger/key", "", nil, nil)
	var key struct {
		VerifierKey string `json:"verifier_key"`
	}
	if err := json.Unmarshal(vkey, &key); err != nil {
		t.Fatal(err)
	}
	verifier, err := provenance.ParseVerifierKey(key.VerifierKey)
	if err != nil {
		t.Fatal(err)
	}
	_, note, _, _ := c.call(0, http.MethodGet, "/api/v1/ledger/checkpoint?format=note", "", nil, nil)
	cp, err := provenance.OpenCheckpoint(note, verifier)
	if err != nil {
		t.Fatalf("checkpoint: %v\n%s", err, note)
	}
	if cp.Size != n {
		t.Fatalf("checkpoint size %d, sealed events %d", cp.Size, n)
	}
	for i := range n {
		st, body, _, err := c.call(int(i)+1, http.MethodGet, "/api/v1/ledger/events/"+strconv.FormatInt(i, 10), c.auditor, nil, nil)
		var ev provenance.LedgerEvent
		if err != nil || st != http.StatusOK || json.Unmarshal(body, &ev) != nil {
			t.Fatalf("event %d: %d %v %s", i, st, err, body)
		}
		st, body, _, err = c.call(int(i)+2, http.MethodGet, fmt.Sprintf("/api/v1/ledger/proofs/inclusion?index=%d&size=%d", i, cp.Size), "", nil, nil)
		var p provenance.InclusionProof
		if err != nil || st != http.StatusOK || json.Unmarshal(body, &p) != nil {
			t.Fatalf("proof %d: %d %v %s", i, st, err, body)
		}
		if err := tlog.CheckRecord(p.Proof, cp.Size, cp.Root, i, tlog.RecordHash(ev.Leaf)); err != nil {
			t.Fatalf("event %d does not check against the signed checkpoint: %v", i, err)
		}
	}
	var cps struct {
		Items []provenance.Checkpoint
	}
	st, body, _, err := c.call(1, http.MethodGet, "/api/v1/ledger/checkpoints?limit=1000", "", nil, nil)
	if err != nil || st != http.StatusOK || json.Unmarshal(body, &cps) != nil || len(cps.Items) < 2 {
		t.Fatalf("checkpoints: %d %v %s", st, err, body)
	}
	for _, old := range cps.Items {
		if old.Size == cp.Size {
			continue
		}
		st, body, _, err := c.call(2, http.MethodGet, fmt.Sprintf("/api/v1/ledger/proofs/consistency?from=%d&to=%d", old.Size, cp.Size), "", nil, nil)
		var p provenance.ConsistencyProof
		if err != nil || st != http.StatusOK || json.Unmarshal(body, &p) != nil {
			t.Fatalf("consistency %d→%d: %d %v %s", old.Size, cp.Size, st, err, body)
		}
		if err := tlog.CheckTree(p.Proof, cp.Size, cp.Root, old.Size, old.Root); err != nil {
			t.Fatalf("checkpoint of size %d is not a prefix of the newest: %v", old.Size, err)
		}
	}
	t.Logf("figure: three processes: ledger of %d events without gaps, %d checkpoints consistent, every inclusion proof checked against a checkpoint another process signed", n, len(cps.Items))

	cmd := exec.Command(c.procs[0].cmd.Path, "ledger", "verify", "-key", key.VerifierKey)
	cmd.Env = append(os.Environ(), "BEAMLEDGER_DATABASE_URL="+c.url)
	if out, err := cmd.CombinedOutput(); err != nil || !strings.Contains(string(out), fmt.Sprintf("ledger intact: size %d", n)) {
		t.Fatalf("ledger verify: %v\n%s", err, out)
	}
}

// checkSweptOnce abandons two uploads on each process and waits until they are
// gone: the sweeps that every process runs must, between them, report each one
// exactly once.
func (c *cluster) checkSweptOnce() {
	t := c.t
	before := c.sweptUploads()
	const abandoned = 6
	for i := range abandoned {
		u := c.researchers[i]
		st, body, h, err := c.call(i, http.MethodPost, "/api/v1/uploads", u.token, nil, map[string]string{
			"Tus-Resumable": "1.0.0", "Upload-Length": "1000",
			"Upload-Metadata": "filename " + b64("left.raw") + ",project_id " + b64(u.project)})
		if err != nil || st != http.StatusCreated {
			t.Fatalf("abandoned upload: %d %v %s", st, err, body)
		}
		st, body, _, err = c.call(i+1, http.MethodPatch, h.Get("Location"), u.token, strings.NewReader("only some bytes"),
			map[string]string{"Tus-Resumable": "1.0.0", "Content-Type": "application/offset+octet-stream", "Upload-Offset": "0"})
		if err != nil || st != http.StatusNoContent {
			t.Fatalf("abandoned upload PATCH: %d %v %s", st, err, body)
		}
	}
	waitFor(t, 60*time.Second, "the abandoned uploads swept", func() bool {
		var left int64
		err := c.sql.QueryRow(context.Background(), `SELECT count(*) FROM uploads`).Scan(&left)
		return err == nil && left == 0
	})
	// The sweep logs after it commits; give the last one a moment to write.
	time.Sleep(500 * time.Millisecond)
	if got := c.sweptUploads() - before; got != abandoned {
		t.Errorf("the processes' sweeps reported %d uploads between them, want each of %d exactly once", got, abandoned)
	}
}

// checkNoShowsOnce records six bookings that began three hours ago and were never
// used, and waits until they are marked as no-shows: the no-show job every
// process runs must, between them, report each one exactly once.
func (c *cluster) checkNoShowsOnce(ctx context.Context) {
	t := c.t
	before := c.loggedCount("no-shows marked", "bookings")
	start := time.Now().UTC().Add(-3 * time.Hour).Truncate(time.Minute)
	for i, u := range c.researchers {
		nb := scheduling.NewBooking{InstrumentID: c.instrs[i%len(c.instrs)], ProjectID: u.project, UserID: u.id,
			Kind: scheduling.KindIndependent, Start: start.Add(time.Duration(i/len(c.instrs)) * time.Hour), Actor: u.id}
		nb.End = nb.Start.Add(30 * time.Minute)
		if err := c.db.InsertBookingRow(ctx, nb); err != nil {
			t.Fatal(err)
		}
	}
	// These are the only bookings in the past, so the only no-shows there can be.
	want := len(c.researchers)
	waitFor(t, 60*time.Second, "the unused bookings marked as no-shows", func() bool {
		var n int
		err := c.sql.QueryRow(ctx, `SELECT count(*) FROM no_shows`).Scan(&n)
		return err == nil && n == want
	})
	time.Sleep(500 * time.Millisecond)
	if got := c.loggedCount("no-shows marked", "bookings") - before; got != want {
		t.Errorf("the processes' no-show jobs reported %d bookings between them, want each of %d exactly once", got, want)
	}
	t.Logf("figure: three processes: %d no-shows marked once each by the job every process runs", want)
}

// checkCharges prices the no-shows just marked: managers on all three processes
// compute every project's statement for the month at once, three times over; every
// answer succeeds, each project ends with one draft, and its total is what one
// process computing alone then finds.
func (c *cluster) checkCharges(ctx context.Context) {
	t := c.t
	now := time.Now().UTC()
	for _, in := range c.instrs {
		if _, err := c.db.CreateRateSchedule(ctx, scheduling.RateSchedule{InstrumentID: in, EffectiveFrom: now.AddDate(0, -3, 0), Currency: "EUR",
			Classes: []scheduling.ClassRates{{RateClass: accounts.RateInternal, IndependentHourlyMinor: 9000, AssistedHourlyMinor: 12000,
				TrainingHourlyMinor: 6000, UnattendedHourlyMinor: 4000, StaffHourlyMinor: 5000}}}, c.staffID, now); err != nil {
			t.Fatal(err)
		}
	}
	for i, u := range c.researchers {
		a, err := c.db.SaveFundingAccount(ctx, scheduling.FundingAccount{ProjectID: u.project, Code: fmt.Sprintf("GRANT-%d", i)}, c.staffID, now)
		if err != nil {
			t.Fatal(err)
		}
		if err := c.db.SetProjectFunding(ctx, u.project, []scheduling.FundingShare{{AccountID: a.ID, BasisPoints: 10000}}, c.staffID, now); err != nil {
			t.Fatal(err)
		}
	}
	vienna, _ := time.LoadLocation("Europe/Vienna")
	month := now.Add(-3 * time.Hour).In(vienna).Format("2006-01")
	type answer struct {
		id, project string
		total       int64
	}
	var mu sync.Mutex
	var answers []answer
	var wg sync.WaitGroup
	for round := range 3 {
		for i, u := range c.researchers {
			wg.Add(1)
			go func() {
				defer wg.Done()
				st, body, err := c.postJSON(round+i, "/api/v1/projects/"+u.project+"/statements", c.manager, map[string]string{"month": month})
				var got struct {
					ID         string `json:"id"`
					TotalMinor int64  `json:"total_minor"`
				}
				if err != nil || (st != http.StatusCreated && st != http.StatusOK) || json.Unmarshal(body, &got) != nil {
					t.Errorf("statement of project %d on process %d: %d %v %s", i, (round+i)%3, st, err, body)
					return
				}
				mu.Lock()
				answers = append(answers, answer{got.ID, u.project, got.TotalMinor})
				mu.Unlock()
			}()
		}
	}
	wg.Wait()
	if t.Failed() {
		t.FailNow()
	}
	var sum int64
	for i, u := range c.researchers {
		st, body, err := c.postJSON(0, "/api/v1/projects/"+u.project+"/statements", c.manager, map[string]string{"month": month})
		var alone struct {
			ID         string `json:"id"`
			TotalMinor int64  `json:"total_minor"`
		}
		if err != nil || st != http.StatusOK || json.Unmarshal(body, &alone) != nil {
			t.Fatalf("recomputing project %d alone: %d %v %s", i, st, err, body)
		}
		if alone.TotalMinor <= 0 {
			t.Errorf("project %d: total %d; its no-show should be charged", i, alone.TotalMinor)
		}
		for _, a := range answers {
			if a.project == u.project && (a.id != alone.ID || a.total != alone.TotalMinor) {
				t.Errorf("project %d: a concurrent computation gave statement %s total %d; alone: %s total %d", i, a.id, a.total, alone.ID, alone.TotalMinor)
			}
		}
		sum += alone.TotalMinor
	}
	var dup int
	if err := c.sql.QueryRow(ctx, `SELECT count(*) FROM (SELECT 1 FROM statements GROUP BY project_id, period_start HAVING count(*) > 1) d`).Scan(&dup); err != nil || dup != 0 {
		t.Errorf("projects with more than one statement for the month: %d %v", dup, err)
	}
	t.Logf("figure: three processes: %d statement computations at once for %d projects gave the totals one process gives alone (%d minor units in all), one draft each",
		len(answers), len(c.researchers), sum)
}

// loggedCount sums attribute attr of every log line msg of every process.
func (c *cluster) loggedCount(msg, attr string) int {
	n := 0
	for _, p := range c.procs {
		for _, line := range p.logLines() {
			var l map[string]any
			if json.Unmarshal([]byte(line), &l) == nil && l["msg"] == msg {
				if v, ok := l[attr].(float64); ok {
					n += int(v)
				}
			}
		}
	}
	return n
}

// sweptUploads sums the uploads every process's cleanup reports having removed.
func (c *cluster) sweptUploads() int {
	n := 0
	for _, p := range c.procs {
		for _, line := range p.logLines() {
			var l struct {
				Msg     string
				Uploads int
			}
			if json.Unmarshal([]byte(line), &l) == nil && l.Msg == "upload cleanup" {
				n += l.Uploads
			}
		}
	}
	return n
}
