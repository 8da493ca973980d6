"""The desk in a real headless Chromium (selenium + Debian's chromedriver) against the real
service: the API command `make run` starts, on a free port, with its own var/ folder.

Skipped only when chromium or chromedriver is absent and SIZEWISE_REQUIRE_BROWSER is unset
(.ci/run installs both and sets it).
"""

from __future__ import annotations

import json
import os
import shutil
import urllib.request

import pytest

from service.run_local import API_COMMAND, local_argv, local_environment
from service.store import tokens as token_store
from service.store.db import make_engine, make_sessionmaker, session_scope
from service.store.migrate import upgrade
from tests.conftest import request_body
from tests.ops._procs import free_port, start, stop_group, tail, wait_for

CHROMIUM = shutil.which("chromium") or "/usr/bin/chromium"
CHROMEDRIVER = shutil.which("chromedriver") or "/usr/bin/chromedriver"

pytestmark = [
    pytest.mark.browser,
    pytest.mark.skipif(
        not (os.path.exists(CHROMIUM) and os.path.exists(CHROMEDRIVER))
        and not os.environ.get("SIZEWISE_REQUIRE_BROWSER"),
        reason="chromium or chromedriver not installed (apt-get install chromium "
        "chromium-driver; SIZEWISE_REQUIRE_BROWSER=1 makes this a failure)",
    ),
]

PEOPLE = {
    "intake": ("intake", "a.okafor"),
    "other intake": ("intake", "l.nguyen"),
    "statistician": ("statistician", "j.moreau"),
    "auditor": ("auditor", "k.ito"),
}


def _call(url: str, secret: str, body: dict | None = None) -> dict:
    data = json.dumps(body).encode() if body is not None else None
    req = urllib.request.Request(url, data=data, method="POST" if body is not None else "GET")
    req.add_header("Authorization", f"Bearer {secret}")
    req.add_header("Content-Type", "application/json")
    with urllib.request.urlopen(req, timeout=30) as response:
        return json.loads(response.read())


def _body(title: str, deadline: str) -> dict:
    body = request_body(deadline=deadline)
    body["protocol"] = dict(body["protocol"], title=title)
    return body


@pytest.fixture(scope="module")
def service(tmp_path_factory):
    """The real API (gunicorn, two processes) with tokens and three computed requests."""
    root = tmp_path_factory.mktemp("desk-browser")
    var = root / "var"
    var.mkdir()
    port = free_port()
    base = {k: v for k, v in os.environ.items() if not k.startswith("SIZEWISE_")}
    base.update(SIZEWISE_VAR_DIR=str(var), SIZEWISE_PORT=str(port))
    env = local_environment(base)  # plain HTTP on 127.0.0.1: the desk's cookie is not Secure
    upgrade(env["SIZEWISE_DATABASE_URL"])
    engine = make_engine(env["SIZEWISE_DATABASE_URL"])
    secrets = {}
    with session_scope(make_sessionmaker(engine)) as session:
        for who, (role, name) in PEOPLE.items():
            secrets[who] = token_store.create_token(session, role, name)[1]
    engine.dispose()
    log = root / "api.log"
    proc = start(local_argv(API_COMMAND), env, log)
    url = f"http://127.0.0.1:{port}"
    try:

        def up() -> bool:
            if proc.poll() is not None:
                raise AssertionError(f"the API exited early:\n{tail(log)}")
            try:
                with urllib.request.urlopen(f"{url}/healthz", timeout=2) as r:
                    return r.status == 200
            except OSError:
                return False

        wait_for(up, 90, "the API's /healthz", step=0.5)
        ids = {
            "hip": _call(
                f"{url}/v1/requests",
                secrets["intake"],
                _body("Early mobilisation after hip fracture surgery", "2025-09-30"),
            )["id"],
            "falls": _call(
                f"{url}/v1/requests",
                secrets["intake"],
                _body("Falls prevention in the geriatric ward", "2099-03-01"),
            )["id"],
            "other": _call(
                f"{url}/v1/requests",
                secrets["other intake"],
                _body("Sleep hygiene on the cardiology ward", "2099-01-15"),
            )["id"],
        }
        # The analytic answers are computed at submission; the second one is approved already.
        _call(f"{url}/v1/requests/{ids['falls']}/approve", secrets["statistician"], {"note": "ok"})
        yield {"url": url, "secrets": secrets, "ids": ids, "log": log}
    finally:
        stop_group(proc)


@pytest.fixture(scope="module")
def browser(tmp_path_factory):
    """One headless Chromium for the module, driven through Debian's chromedriver."""
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service

    options = webdriver.ChromeOptions()
    options.binary_location = CHROMIUM
    for arg in ("--headless=new", "--no-sandbox", "--disable-gpu", "--disable-dev-shm-usage"):
        options.add_argument(arg)
    options.add_argument(f"--user-data-dir={tmp_path_factory.mktemp('chromium-profile')}")
    driver = webdriver.Chrome(service=Service(CHROMEDRIVER), options=options)
    driver.set_page_load_timeout(60)
    try:
        yield driver
    finally:
        driver.quit()


def _navigates(driver, act) -> None:
    """Run ``act`` (a click or a script that submits) and wait until the next page has loaded."""
    from selenium.webdriver.common.by import By
    from selenium.webdriver.support import expected_conditions
    from selenium.webdriver.support.ui import WebDriverWait

    old = driver.find_element(By.TAG_NAME, "html")
    act()
    wait = WebDriverWait(driver, 60)
    wait.until(expected_conditions.staleness_of(old))
    wait.until(lambda d: d.execute_script("return document.readyState") == "complete")


def _sign_in(driver, service, who: str) -> None:
    from selenium.webdriver.common.by import By

    driver.delete_all_cookies()
    driver.get(f"{service['url']}/desk/")
    assert "/desk/sign-in" in driver.current_url
    driver.find_element(By.ID, "token").send_keys(service["secrets"][who])
    _navigates(driver, driver.find_element(By.ID, "sign-in").click)
    role, name = PEOPLE[who]
    assert driver.find_element(By.ID, "signed-in-as").text == f"{name} ({role})"


def _queue_ids(driver) -> list[str]:
    from selenium.webdriver.common.by import By

    rows = driver.find_elements(By.CSS_SELECTOR, "#queue tbody tr")
    return [r.get_attribute("data-request") for r in rows]


def test_sign_in_filter_open_a_request_and_approve_it(browser, service):
    from selenium.webdriver.common.by import By
    from selenium.webdriver.support.ui import Select

    _sign_in(browser, service, "statistician")
    ids = service["ids"]
    assert set(_queue_ids(browser)) == set(ids.values())
    # The overdue request is marked in its row.
    hip_row = browser.find_element(By.CSS_SELECTOR, f'tr[data-request="{ids["hip"]}"]')
    assert "overdue" in hip_row.get_attribute("class") and "overdue" in hip_row.text

    Select(browser.find_element(By.ID, "f-status")).select_by_value("computed")
    _navigates(browser, browser.find_element(By.ID, "apply-filters").click)
    assert "status=computed" in browser.current_url
    assert set(_queue_ids(browser)) == {ids["hip"], ids["other"]}

    link = browser.find_element(By.LINK_TEXT, "Early mobilisation after hip fracture surgery")
    _navigates(browser, link.click)
    assert browser.find_element(By.ID, "request-status").get_attribute("data-status") == "computed"
    assert browser.find_element(By.ID, "justification-text").text  # today's report is there
    browser.find_element(By.ID, "approve-note").send_keys("Effect size agreed with the PI.")
    _navigates(browser, browser.find_element(By.ID, "approve").click)

    status = browser.find_element(By.ID, "request-status")
    assert status.get_attribute("data-status") == "approved" and status.text == "Approved"
    history = browser.find_element(By.ID, "history").text
    assert "Approved by j.moreau (statistician): Effect size agreed with the PI." in history
    assert not browser.find_elements(By.ID, "approve")  # nothing left to approve


def test_a_form_posted_without_its_csrf_token_is_refused(browser, service):
    from selenium.webdriver.common.by import By

    _sign_in(browser, service, "statistician")
    browser.get(f"{service['url']}/desk/requests/{service['ids']['other']}")
    browser.find_element(By.NAME, "text").send_keys("Posted without the form's token")
    browser.execute_script(
        "document.querySelector('#comment-form input[name=csrf_token]').remove();"
    )
    _navigates(browser, browser.find_element(By.ID, "comment").click)
    assert browser.find_element(By.TAG_NAME, "h1").text == "Form refused"
    assert "CSRF token is missing" in browser.find_element(By.ID, "refusal-message").text
    browser.get(f"{service['url']}/desk/requests/{service['ids']['other']}")
    assert "Posted without the form's token" not in browser.find_element(By.ID, "history").text


def test_an_intake_token_sees_only_its_own_requests(browser, service):
    from selenium.webdriver.common.by import By

    _sign_in(browser, service, "intake")
    ids = service["ids"]
    assert set(_queue_ids(browser)) == {ids["hip"], ids["falls"]}
    assert "Sleep hygiene" not in browser.find_element(By.ID, "queue").text
    browser.get(f"{service['url']}/desk/requests/{ids['other']}")
    assert browser.find_element(By.TAG_NAME, "h1").text == "Not found"
    # Intake reads; it has no review forms.
    browser.get(f"{service['url']}/desk/requests/{ids['hip']}")
    assert not browser.find_elements(By.ID, "review")
    _navigates(browser, browser.find_element(By.ID, "sign-out").click)
    assert "/desk/sign-in" in browser.current_url
    browser.get(f"{service['url']}/desk/requests")
    assert "/desk/sign-in" in browser.current_url  # the session ended on sign-out


def test_an_auditor_sees_no_approve_button_and_cannot_approve_by_posting(browser, service):
    from selenium.webdriver.common.by import By

    _sign_in(browser, service, "auditor")
    request_id = service["ids"]["other"]
    browser.get(f"{service['url']}/desk/requests/{request_id}")
    assert not browser.find_elements(By.ID, "approve")
    assert browser.find_elements(By.ID, "rerun")  # the auditor's own action is offered
    # Build the approve form by hand, with this page's valid CSRF token, and post it.
    script = """
        const token = document.querySelector('input[name=csrf_token]').value;
        const form = document.createElement('form');
        form.method = 'post';
        form.action = arguments[0];
        for (const [name, value] of [['csrf_token', token], ['note', 'by hand']]) {
            const input = document.createElement('input');
            input.type = 'hidden'; input.name = name; input.value = value;
            form.appendChild(input);
        }
        document.body.appendChild(form);
        form.submit();
        """
    _navigates(
        browser, lambda: browser.execute_script(script, f"/desk/requests/{request_id}/approve")
    )
    assert browser.find_element(By.TAG_NAME, "h1").text == "Not allowed for your role"
    assert (
        "Your role (auditor) may not do this" in browser.find_element(By.ID, "refusal-message").text
    )
    status = _call(f"{service['url']}/v1/requests/{request_id}", service["secrets"]["auditor"])
    assert status["status"] == "computed"


def test_the_intake_page_fill_it_submit_and_land_on_the_request_page(browser, service):
    from selenium.webdriver.common.by import By
    from selenium.webdriver.support.ui import Select

    _sign_in(browser, service, "intake")
    _navigates(browser, browser.find_element(By.LINK_TEXT, "Intake").click)
    cell = browser.find_element(By.CSS_SELECTOR, 'a[data-cell="continuous/two_groups"]')
    assert cell.text == "Continuous outcome, two groups"
    _navigates(browser, cell.click)
    assert browser.find_element(By.ID, "intake-title").text == "Continuous outcome, two groups"

    def fill(name: str, text: str) -> None:
        element = browser.find_element(By.NAME, name)
        element.clear()
        element.send_keys(text)

    fill("protocol.id", "NGH-2026-207")
    fill("protocol.title", "Night-time mobility after knee replacement")
    fill("requester.name", "Dr. Lena Brandt")
    fill("requester.email", "l.brandt@northbridge-general.example")
    fill("requester.department", "Orthopaedics")
    # A date input's typed format follows the browser's locale; set the ISO value it posts.
    browser.execute_script("document.querySelector('input[name=deadline]').value = '2099-06-30';")
    Select(browser.find_element(By.NAME, "question.analysis")).select_by_value("welch_t")
    fill("question.effect.difference", "-5")
    fill("question.assumptions.sd_control", "12")
    fill("question.target_power", "0.9")
    # First without sd_treatment: the form comes back with the message beside that input.
    _navigates(browser, browser.find_element(By.ID, "intake-submit").click)
    assert "/desk/intake/continuous/two_groups" in browser.current_url
    beside = browser.find_element(
        By.CSS_SELECTOR, '[data-field="question.assumptions.sd_treatment"] .field-error'
    )
    assert beside.text
    assert browser.find_element(By.NAME, "protocol.id").get_attribute("value") == "NGH-2026-207"
    fill("question.assumptions.sd_treatment", "14")
    _navigates(browser, browser.find_element(By.ID, "intake-submit").click)

    assert "/desk/requests/" in browser.current_url
    request_id = browser.current_url.rstrip("/").rsplit("/", 1)[-1]
    status = browser.find_element(By.ID, "request-status")
    assert status.get_attribute("data-status") == "computed"
    page = browser.find_element(By.TAG_NAME, "body").text
    assert "Night-time mobility after knee replacement" in page
    assert "Continuous outcome, two groups" in page and "Welch's t test" in page
    stored = _call(f"{service['url']}/v1/requests/{request_id}", service["secrets"]["intake"])
    assert stored["question"]["analysis"] == "welch_t"
    assert stored["requester"]["department"] == "Orthopaedics"
    assert stored["deadline"] == "2099-06-30"
