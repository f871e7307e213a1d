"""The bad-input corpus: every file in tests/data/bad/cases.tsv must give its
expected exit code and a one-line error that names the file and contains the
expected fragment, never a crash, never output on stdout."""
import os
import unittest

from common import SOURCE_ROOT, run, tempdir

BAD = os.path.join(SOURCE_ROOT, "tests", "data", "bad")


def cases():
    with open(os.path.join(BAD, "cases.tsv")) as f:
        for line in f:
            if line.startswith("#") or not line.strip():
                continue
            name, args, code, fragment = line.rstrip("\n").split("\t")
            yield name, args, int(code), fragment


def expand(args, name, tmp):
    subst = {
        "tmp": tmp,
        "f": os.path.join(BAD, name),
        "ss": os.path.join(BAD, "good_rtstruct.dcm"),
        "plan": os.path.join(BAD, "good_rtplan.dcm"),
        "model": os.path.join(SOURCE_ROOT, "models", "demo-e1.yaml"),
    }
    return [a.format(**subst) for a in args.split(" ")]


class BadInputs(unittest.TestCase):
    def test_corpus_is_large_enough(self):
        self.assertGreaterEqual(len(list(cases())), 40)

    def test_the_good_model_and_measurements_read(self):
        rc, out, err = run("model", "show", os.path.join(BAD, "good_model.yaml"))
        self.assertEqual(rc, 0, err)
        with tempdir() as tmp:
            rc, out, err = run("fit", os.path.join(BAD, "good_measurements.yaml"), "-o",
                               os.path.join(tmp, "m.yaml"), "-q")
        self.assertEqual(rc, 0, err)

    def test_huge_yaml_is_refused_without_reading_it(self):
        """A model file of hundreds of MB: refused on its size (a sparse
        file, so the test costs no disk)."""
        with tempdir() as tmp:
            path = os.path.join(tmp, "huge.yaml")
            with open(path, "wb") as f:
                f.truncate(300 << 20)
            rc, out, err = run("model", "show", path)
        self.assertEqual(rc, 3)
        self.assertIn("more than the limit", err)

    def test_the_good_pair_reads(self):
        rc, out, err = run("inspect", os.path.join(BAD, "good_rtplan.dcm"),
                           os.path.join(BAD, "good_rtstruct.dcm"))
        self.assertEqual(rc, 0, err)

    def test_the_good_dose_reads(self):
        """The RT Dose the rtdose_* cases break is itself accepted."""
        rc, out, err = run("estimate", os.path.join(BAD, "good_rtplan.dcm"),
                           os.path.join(BAD, "good_rtstruct.dcm"), "--model",
                           os.path.join(SOURCE_ROOT, "models", "demo-e1.yaml"), "--tps-dose",
                           os.path.join(BAD, "good_rtdose.dcm"), "--format", "json")
        self.assertIn(rc, (0, 4), err)
        self.assertIn('"planning_system_dose"', out)

    def check_case(self, name, args, code, fragment):
        with tempdir() as tmp:
            rc, out, err = run(*expand(args, name, tmp))
        self.assertEqual(rc, code, "%s: exit %d, expected %d; stderr: %s" % (name, rc, code, err))
        prefix = "strayline %s: " % args.split()[0]
        lines = [l for l in err.splitlines() if not l.startswith(prefix + "warning:")]
        self.assertEqual(len(lines), 1, "%s: not one line: %r" % (name, err))
        # one error prefix, naming the command (clig.dev, "errors": common practice)
        self.assertTrue(lines[0].startswith(prefix), "%s: %r lacks %r" % (name, lines[0], prefix))
        self.assertIn(fragment, lines[0], name)
        # a measurement set whose CSV is bad is reported with the CSV's name
        named = ".csv:" if name.startswith("csv_") else name
        self.assertIn(named, lines[0], "%s: the message must name the file" % name)
        self.assertEqual(out, "", name)


def _add(case):
    name = case[0]
    method = "test_" + name.replace(".", "_").replace("-", "_")
    setattr(BadInputs, method, lambda self: self.check_case(*case))


for _case in cases():
    _add(_case)


if __name__ == "__main__":
    unittest.main()
