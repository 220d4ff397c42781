"""Replay 5 (issue 4, test 5): --report writes one self-contained page that
is valid XML (xmllint --noout, and Python's parser), with exactly one SVG
plot in each plot section: the score plot, one per alarm kept, the p-value
histogram; plus the summary table.  No script, nothing fetched.  A long
recording stays small (min/max per pixel column)."""
import os
import shutil
import subprocess
import xml.etree.ElementTree as ET

import qwtest as q

q.need_program()
if shutil.which("xmllint") is None:
    print("xmllint missing (libxml2-utils)")
    raise SystemExit(77)
tmp = q.tmpdir()
N = 200000
t, x = q.skid_readings(N, seed=31, fault=(150000, 150040))
x[180000:180030, 3] += 0.5
ini = os.path.join(tmp, "r.ini")
with open(ini, "w") as f:
    f.write(q.ini(tmp, {"skid": q.skid_group(channels=["supply_t",
                                                       "return_t", "flow",
                                                       "pump&amps"])},
                  [">tcp://127.0.0.1:5999"]))
data = os.path.join(tmp, "r.csv")
q.np.savetxt(data, q.np.column_stack([t, x]), delimiter=",", fmt="%.10g",
             header="time,supply_t,return_t,flow,pump&amps", comments="")
page = os.path.join(tmp, "r.html")
r = subprocess.run([q.QW, "replay", "-c", ini, "-q", "--json", "--report",
                    page, data], capture_output=True, text=True)
q.check(r.returncode == 0, "exit %d %s" % (r.returncode, r.stderr))
size = os.path.getsize(page)
r = subprocess.run(["xmllint", "--noout", page], capture_output=True,
                   text=True)
q.check(r.returncode == 0, "xmllint: %s" % r.stderr)
ns = {"h": "http://www.w3.org/1999/xhtml", "s": "http://www.w3.org/2000/svg"}
root = ET.parse(page).getroot()
plots = [s for s in root.iter("{%s}section" % ns["h"])
         if s.get("class") == "plot"]
tables = [s for s in root.iter("{%s}section" % ns["h"])
          if s.get("class") == "table"]
titles = [s.find("h:h3", ns).text for s in plots]
q.note("%d bytes for %d readings; plot sections: %s" % (size, N, titles))
for s in plots:
    svgs = list(s.iter("{%s}svg" % ns["s"]))
    q.check(len(svgs) == 1, "section %r has %d svg" %
            (s.find("h:h3", ns).text, len(svgs)))
    q.check(svgs[0].find("s:title", ns) is not None, "svg without title")
alarms = [t for t in titles if t.startswith("Alarm at")]
q.check(titles[0] == "Score against the limit", "first %r" % titles[0])
q.check(titles[-1] == "P-values after warm-up", "last %r" % titles[-1])
q.check(2 <= len(alarms) <= 6, "alarm sections %r" % alarms)
q.check(len(tables) == 1 and tables[0].find(".//h:table", ns) is not None,
        "summary table")
text = open(page).read()
q.check("<script" not in text and "href=" not in text and "src=" not in text,
        "page refers outside itself")
q.check("pump&amp;amps" in text, "channel name not escaped")
q.check(size < 400000, "page %d bytes" % size)
print("ok")
