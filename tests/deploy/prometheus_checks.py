#!/usr/bin/python3
"""prometheus_checks.py: check the Prometheus files in deploy/prometheus/.

    prometheus_checks.py config|rules|test --source-dir REPO [--plumbline BIN]

  config  `promtool check config prometheus.yml` (which also checks the rule
          file it loads) passes, and its plumbline target is the daemon's
          default HTTP address as `plumbline check-config --defaults` reports it.
  rules   `promtool check rules` passes with every lint; each rule has a
          severity label and a summary and description, the description
          carries the advisory caution, and every plumbline_* series a rule
          reads is one the daemon exports (daemon/metrics.cc).
  test    `promtool test rules plumbline_rules_test.yml` passes.

Each mode also runs broken copies (a bad expression, a missing caution, a
rule that never or always fires, a dropped `for:` hold) and fails unless
every one of them is caught, so no mode can pass by checking nothing.
promtool and Prometheus are Debian 12's `prometheus` package (2.42).
"""
import argparse
import copy
import os
import re
import shutil
import subprocess
import sys
import tempfile

import yaml  # Debian's python3-yaml

CAUTION = [  # phrases every alert description must hold (README.md, "Caution")
    "Advisory",
    "quality procedures",
    "inspection plans",
    "no safety interlock",
]


def run(cmd, cwd=None):
    p = subprocess.run(cmd, cwd=cwd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                       timeout=120)
    return p.returncode, p.stdout + p.stderr


def promtool_ok(args, cwd=None):
    rc, out = run(["promtool"] + args, cwd=cwd)
    return rc == 0, "promtool %s: exit %d\n%s" % (" ".join(args), rc, out)


def load(path):
    with open(path) as f:
        return yaml.safe_load(f)


def dump(doc, path):
    with open(path, "w") as f:
        yaml.safe_dump(doc, f, sort_keys=False, width=1000)


def alert_rules(doc):
    return [r for g in doc["groups"] for r in g["rules"] if "alert" in r]


def exported_metrics(source_dir):
    """The metric names daemon/metrics.cc defines (quoted "plumbline_..." names)."""
    with open(os.path.join(source_dir, "daemon", "metrics.cc")) as f:
        return set(re.findall(r'"(plumbline_[a-z_]+)"', f.read()))


def rule_problems(doc, metrics):
    """What is wrong with the rules' labels, annotations and series names."""
    problems = []
    rules = alert_rules(doc)
    if not rules:
        problems.append("no alert rules")
    for r in rules:
        name = r["alert"]
        if r.get("labels", {}).get("severity") not in ("info", "warning", "critical"):
            problems.append("%s: no severity label (info, warning or critical)" % name)
        ann = r.get("annotations", {})
        for key in ("summary", "description"):
            if not ann.get(key):
                problems.append("%s: no %s annotation" % (name, key))
        missing = [c for c in CAUTION if c not in ann.get("description", "")]
        if missing:
            problems.append("%s: the description lacks the caution (%s)" % (name,
                                                                            ", ".join(missing)))
        used = set(re.findall(r"plumbline_[a-z_]+", r["expr"]))
        for text in ann.values():
            used |= set(re.findall(r"plumbline_[a-z_]+", text))
        for m in sorted(used - metrics):
            problems.append("%s: reads %s, which the daemon does not export" % (name, m))
    return problems


def check_config(a, prom_dir, tmp):
    failures = []
    ok, report = promtool_ok(["check", "config", os.path.join(prom_dir, "prometheus.yml")])
    print(report)
    if not ok:
        failures.append("promtool check config failed on prometheus.yml")

    # The example scrapes the daemon where it listens by default.
    rc, out = run([a.plumbline, "check-config", "--defaults"])
    m = re.search(r"^\s*listen\s*=\s*\"([^\"]+)\"", out, re.M)
    if rc != 0 or not m:
        failures.append("plumbline check-config --defaults gave no [http] listen:\n" + out)
    else:
        targets = [t for job in load(os.path.join(prom_dir, "prometheus.yml"))["scrape_configs"]
                   if job["job_name"] == "plumbline"
                   for sc in job.get("static_configs", []) for t in sc["targets"]]
        print("daemon's default HTTP address %s; plumbline job targets %s" % (m.group(1), targets))
        if targets != [m.group(1)]:
            failures.append("the plumbline job scrapes %s, not the daemon's default %s"
                            % (targets, m.group(1)))

    # Negative controls: a broken rule file and a misspelt key.
    cfg = load(os.path.join(prom_dir, "prometheus.yml"))
    rules = load(os.path.join(prom_dir, "plumbline_rules.yml"))
    bad_rules = copy.deepcopy(rules)
    bad_rules["groups"][0]["rules"][0]["expr"] = "plumbline_alarm =="
    bad_key = copy.deepcopy(cfg)
    bad_key["scrape_configs"][0]["scrape_intervall"] = "15s"
    for what, c, r in (("a rule file with a bad expression", cfg, bad_rules),
                       ("a misspelt key", bad_key, rules)):
        d = tempfile.mkdtemp(dir=tmp)
        dump(c, os.path.join(d, "prometheus.yml"))
        dump(r, os.path.join(d, "plumbline_rules.yml"))
        ok, report = promtool_ok(["check", "config", os.path.join(d, "prometheus.yml")])
        print("negative control, %s: %s" % (what, "caught" if not ok else "NOT caught"))
        if ok:
            failures.append("promtool check config accepted %s" % what)
    return failures


def check_rules(a, prom_dir, tmp):
    failures = []
    path = os.path.join(prom_dir, "plumbline_rules.yml")
    ok, report = promtool_ok(["check", "rules", "--lint=all", "--lint-fatal", path])
    print(report)
    if not ok:
        failures.append("promtool check rules failed")
    metrics = exported_metrics(a.source_dir)
    doc = load(path)
    problems = rule_problems(doc, metrics)
    for p in problems:
        failures.append(p)
    print("%d alert rules: %s" % (len(alert_rules(doc)),
                                  ", ".join(r["alert"] for r in alert_rules(doc))))

    # Negative controls.
    bad = copy.deepcopy(doc)
    alert_rules(bad)[0]["expr"] = "rate(plumbline_samples_total[5m]"
    d = tempfile.mkdtemp(dir=tmp)
    dump(bad, os.path.join(d, "plumbline_rules.yml"))
    ok, _ = promtool_ok(["check", "rules", os.path.join(d, "plumbline_rules.yml")])
    print("negative control, a bad expression: %s" % ("caught" if not ok else "NOT caught"))
    if ok:
        failures.append("promtool check rules accepted a bad expression")
    for i, r in enumerate(alert_rules(doc)):
        bad = copy.deepcopy(doc)
        br = alert_rules(bad)[i]
        br["annotations"]["description"] = br["annotations"]["description"].replace(
            "no safety interlock", "not an interlock")
        caught = bool(rule_problems(bad, metrics))
        print("negative control, %s without the caution: %s" %
              (r["alert"], "caught" if caught else "NOT caught"))
        if not caught:
            failures.append("a missing caution in %s went unnoticed" % r["alert"])
    bad = copy.deepcopy(doc)
    alert_rules(bad)[0]["expr"] = "plumbline_alarm_state == 1"
    caught = bool(rule_problems(bad, metrics))
    print("negative control, a series the daemon does not export: %s" %
          ("caught" if caught else "NOT caught"))
    if not caught:
        failures.append("a rule on a series the daemon does not export went unnoticed")
    return failures


def check_tests(a, prom_dir, tmp):
    failures = []
    ok, report = promtool_ok(["test", "rules", "plumbline_rules_test.yml"], cwd=prom_dir)
    print(report)
    if not ok:
        failures.append("promtool test rules failed")

    # Each alert must be tested both firing and not firing, and each hold
    # must be tested: a rule that never fires, one that always fires, and a
    # rule without its `for:` must each fail the unit tests.
    doc = load(os.path.join(prom_dir, "plumbline_rules.yml"))
    mutants = []
    for i, r in enumerate(alert_rules(doc)):
        never = copy.deepcopy(doc)
        alert_rules(never)[i]["expr"] = "vector(1) == 0"
        mutants.append(("%s never firing" % r["alert"], never))
        always = copy.deepcopy(doc)
        alert_rules(always)[i]["expr"] = "vector(1)"
        mutants.append(("%s always firing" % r["alert"], always))
        if "for" in r:
            nohold = copy.deepcopy(doc)
            del alert_rules(nohold)[i]["for"]
            mutants.append(("%s without its for: hold" % r["alert"], nohold))
    for what, m in mutants:
        d = tempfile.mkdtemp(dir=tmp)
        shutil.copy(os.path.join(prom_dir, "plumbline_rules_test.yml"), d)
        dump(m, os.path.join(d, "plumbline_rules.yml"))
        ok, _ = promtool_ok(["test", "rules", "plumbline_rules_test.yml"], cwd=d)
        print("negative control, %s: %s" % (what, "caught" if not ok else "NOT caught"))
        if ok:
            failures.append("promtool test rules passed with %s" % what)
    return failures


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("mode", choices=["config", "rules", "test"])
    ap.add_argument("--source-dir", required=True)
    ap.add_argument("--plumbline", help="the built plumbline binary (mode config)")
    a = ap.parse_args()
    prom_dir = os.path.join(a.source_dir, "deploy", "prometheus")
    if a.mode == "config" and not a.plumbline:
        ap.error("mode config needs --plumbline")
    with tempfile.TemporaryDirectory(prefix="plumbline-prom-") as tmp:
        failures = {"config": check_config, "rules": check_rules,
                    "test": check_tests}[a.mode](a, prom_dir, tmp)
    for f in failures:
        print("FAIL:", f)
    if failures:
        return 1
    print("PASS")
    return 0


if __name__ == "__main__":
    sys.exit(main())
