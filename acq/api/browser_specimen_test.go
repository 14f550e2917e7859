package api_test

import (
	"bytes"
	"fmt"
	"os"
	"strings"
	"testing"
	"time"

	"github.com/chromedp/chromedp"
)

// startRegistryServer is startBenchServer with a specimen registry (R17-003,
// the mounted ring, and R17-004, a second ring of the same size), the
// shipped grade NO-R470 and confirm_mount: true.
func startRegistryServer(t *testing.T) *benchServer {
	t.Helper()
	return startServer(t, serverSetup{
		files: func(t *testing.T, sp []byte) map[string][]byte {
			gr, err := os.ReadFile("../../configs/grade-no-r470.yaml")
			if err != nil {
				t.Fatal(err)
			}
			return map[string][]byte{
				"specimens/r17-003.yaml": sp,
				"specimens/r17-004.yaml": bytes.Replace(sp, []byte("id: R17-003"), []byte("id: R17-004"), 1),
				"grades/no-r470.yaml":    gr,
			}
		},
		config: "specimens: specimens\ngrades: grades\nconfirm_mount: true\n",
	})
}

// TestBrowserSpecimenMountVerdicts: on the review page a recipe is started
// on a specimen chosen from the registry; the run waits until the mount is
// confirmed on the page, runs on the bench, and is stored with that
// specimen; the runs list and the loop view show its verdict against the
// grade; the trend filtered by amplitude keeps only like loops.
func TestBrowserSpecimenMountVerdicts(t *testing.T) {
	if testing.Short() {
		t.Skip("browser test on the real-time bench: not in -short")
	}
	chromium := findChromium(t)
	bs := startRegistryServer(t)
	b := newBrowser(t, chromium)
	b.do(chromedp.Navigate(bs.base + "/"))
	b.wait("page ready", `document.body.dataset.ready === '1'`, 20*time.Second)
	b.wait("specimen choices", `[...document.querySelectorAll('#s-specimen option')].map(o => o.value).join(',') === ',R17-003,R17-004'`, 10*time.Second)

	// 1. Start a 1 kA/m loop on R17-004, chosen in the start form.
	rc := loopRecipe("batch-loop", "1 kA/m", "1 kA/m/s", 300)
	b.do(chromedp.Evaluate[chromedp.Void](fmt.Sprintf(`document.querySelector('#key-input').value = %q; document.querySelector('#key-save').click();
	  document.querySelector('[data-view="start"]').click(); document.querySelector('#s-recipe').value = %q;
	  document.querySelector('#s-specimen').value = 'R17-004';
	  document.querySelector('#s-confirm').click(); document.querySelector('#start-btn').click()`, browserToken, rc)))
	b.wait("run queued on R17-004", `document.querySelector('#start-msg').textContent.includes('on specimen R17-004')`, 10*time.Second)
	id := strings.Fields(strings.TrimPrefix(js[string](b, `document.querySelector('#start-msg').textContent`), "run "))[0]

	// 2. It waits for the mount, shown on the page; the run stays queued until confirmed.
	b.wait("mount request", fmt.Sprintf(`!!document.querySelector('#mounts li[data-run-id=%q]') && document.querySelector('#mounts').textContent.includes('mount R17-004')`, id), 15*time.Second)
	if st := bs.waitRun(t, id, time.Second, "queued"); st != "queued" {
		t.Fatalf("run %s is %s before the mount was confirmed", id, st)
	}
	b.shot("specimen-1-mount.png")
	b.do(chromedp.Evaluate[chromedp.Void](fmt.Sprintf(`document.querySelector('#mounts li[data-run-id=%q] button.mount-ok').click()`, id)))
	bs.waitRun(t, id, 90*time.Second, "finished")
	var rb runBody
	bs.call(t, "GET", "/api/v1/runs/"+id, "", "", &rb)
	if rb.Run.Specimen != "R17-004" {
		t.Fatalf("run stored with specimen %q", rb.Run.Specimen)
	}

	// 3. The runs list shows recipe, specimen and the verdict the API has.
	var list struct {
		Runs []struct{ ID, Verdict, Recipe string }
	}
	bs.call(t, "GET", "/api/v1/runs", "", "", &list)
	want := ""
	for _, r := range list.Runs {
		if r.ID == id {
			want = r.Verdict
		}
	}
	if want != "pass" && want != "fail" && want != "undecided" {
		t.Fatalf("API verdict of %s: %q", id, want)
	}
	b.do(chromedp.Evaluate[chromedp.Void](`document.querySelector('#filter-apply').click()`))
	b.wait("verdict in the runs list", fmt.Sprintf(`(() => { const li = document.querySelector('#runs-list li[data-run-id=%q]');
	  return !!li && li.dataset.verdict === %q && li.querySelector('.verdict').textContent === %q &&
	    li.querySelector('.r-recipe').textContent === 'batch-loop' && li.textContent.includes('R17-004'); })()`, id, want, want), 10*time.Second)
	// The loop view lists each judged figure with its limit.
	b.do(chromedp.Evaluate[chromedp.Void](fmt.Sprintf(`document.querySelector('#runs-list li[data-run-id=%q]').click()`, id)))
	b.wait("verdicts of the loop", fmt.Sprintf(`document.querySelector('#loop-verdict') && document.querySelector('#loop-verdict').textContent === %q &&
	  [...document.querySelectorAll('#verdicts tr[data-verdict]')].some(tr => tr.textContent.includes('HcB') && tr.textContent.includes('≤ 52'))`, want), 15*time.Second)
	b.shot("specimen-2-verdicts.png")

	// 4. A second run on the same specimen at 500 A/m (no mount needed now).
	var sub struct {
		RunID string `json:"run_id"`
	}
	if code := bs.call(t, "POST", "/api/v1/runs?specimen=R17-004", browserToken, loopRecipe("half-loop", "500 A/m", "1 kA/m/s", 200), &sub); code != 202 {
		t.Fatalf("submit: %d", code)
	}
	bs.waitRun(t, sub.RunID, 90*time.Second, "finished")
	trend := func(amp string) {
		b.do(chromedp.Evaluate[chromedp.Void](fmt.Sprintf(`document.querySelector('[data-view="trend"]').click();
		  document.querySelector('#t-specimen').value = 'R17-004'; document.querySelector('#t-figure').value = 'HcB';
		  document.querySelector('#t-amp').value = %q; document.querySelector('#t-hi').value = '52';
		  document.querySelector('#trend-draw').click()`, amp)))
	}
	trend("")
	b.wait("unfiltered trend: both runs", `document.querySelectorAll('#trend-plot circle.trend-pt').length === 2 && document.querySelectorAll('#trend-table tbody tr').length === 2`, 10*time.Second)
	trend("1000")
	b.wait("trend at 1 kA/m only", fmt.Sprintf(`document.querySelectorAll('#trend-plot circle.trend-pt').length === 1 &&
	  document.querySelectorAll('#trend-table tbody tr').length === 1 && document.querySelector('#trend-table tbody tr').textContent.includes(%q) &&
	  ['pass', 'fail', 'undecided'].includes(document.querySelector('#trend-table tbody tr').dataset.verdict)`, id), 10*time.Second)
	b.shot("specimen-3-trend.png")
}
