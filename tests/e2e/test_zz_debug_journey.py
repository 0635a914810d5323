import re
import httpx
from playwright.sync_api import Page, expect
from tests import factories as f
from tests.conftest import auth
from tests.e2e.test_journeys import log_in


def test_debug(page: Page, live_server):
    base = live_server.url
    log = []
    page.on("response", lambda r: log.append(f"{r.status} {r.request.method} {r.url} {r.headers.get('hx-trigger','')}"))
    page.on("console", lambda m: log.append(f"console {m.type}: {m.text}"))
    with httpx.Client(base_url=f"{base}/api/v1", headers=auth("planner")) as api:
        api.post("/cost-bases", json=f.direct_basis(name="Journey basis"))
    with httpx.Client(base_url=f"{base}/api/v1", headers=auth("buyer")) as api:
        r = api.post("/tenders", json=f.tender(1, lots=[f.lot(name="400 kVA ground-mounted")]))
        print(r.status_code)
    log_in(page, base, "buyer")
    page.goto(f"{base}/lots/1")
    add = page.locator("form[action$='/offers']")
    add.get_by_label("Bidder").fill("Lossy Low Price")
    add.get_by_label("Unit price").fill("10000")
    add.locator("[name=no_load_loss_w]").fill("600")
    add.locator("[name=load_loss_w]").fill("5000")
    add.get_by_label("Impedance").fill("4")
    add.get_by_role("button", name="Add offer").click()
    page.wait_for_timeout(3000)
    print("\n".join(log))
    print(page.locator("#offers").inner_text()[:500])
    assert False
