"""Time the workspace's pages in headless Chromium over WebDriver (Selenium): a full page load
(from about:blank) until the page sets body[data-ready=1], its data fetched and drawn. The
first plant and the year before its latest period come from the API."""
import json
import sys
import time
import urllib.request

from selenium import webdriver
from selenium.webdriver.chrome.service import Service

base, token, rounds = sys.argv[1], sys.argv[2], int(sys.argv[3])


def api(path):
    req = urllib.request.Request(base + "/api/v1" + path, headers={"Authorization": "Bearer " + token})
    with urllib.request.urlopen(req) as r:
        return json.load(r)


plant = api("/plants")["plants"][0]
name = plant["name"]
last = plant["last_period"]["start"]
year_before = str(int(last[:4]) - 1) + last[4:]
options = webdriver.ChromeOptions()
options.binary_location = "/usr/bin/chromium"
for a in ["--headless=new", "--no-sandbox", "--window-size=1280,800", "--disable-gpu"]:
    options.add_argument(a)
d = webdriver.Chrome(service=Service("/usr/bin/chromedriver"), options=options)
try:
    d.get(base + "/")
    # The workspace keeps the token in the tab's session storage (server/web/app/api.js).
    d.execute_script("sessionStorage.setItem('loopbal.token', arguments[0])", token)

    def timed(path):
        d.get("about:blank")
        t = time.perf_counter()
        d.get(base + "/#" + path)
        while d.execute_script("return document.body.dataset.ready") != "1":
            if time.perf_counter() - t > 30:
                raise SystemExit("not ready after 30 s: " + path)
            time.sleep(0.005)
        return (time.perf_counter() - t) * 1e3

    pages = [
        ("plants", "/plants"),
        ("the loop", f"/plant/{name}/loop"),
        ("a year of purge_fraction", f"/plant/{name}/figures?from={year_before}&to={last}&name=purge_fraction&subject=purge"),
    ]
    print(f"plant {name}, latest period {last}; {rounds} rounds, 1280 x 800")
    for label, path in pages:
        ts = sorted(timed(path) for _ in range(rounds))
        print(f"  {label}: median {ts[len(ts) // 2]:.0f} ms (min {ts[0]:.0f}, max {ts[-1]:.0f})")
finally:
    d.quit()
