"""`strayline listen` on a loopback port, with DCMTK's own storescu and
echoscu (Debian package dcmtk) as the real clients; pydicom reads what was
sent and Python's sqlite3 reads the screening log.

Every loop here is bounded (timeouts, retry counts); ports are picked free by
binding port 0 on 127.0.0.1, and nothing listens beyond the loopback test.
The objects sent are the invented demo cases (not real patients, not for
clinical use), some copied with new UIDs by pydicom.
"""
import glob
import json
import os
import shutil
import signal
import socket
import sqlite3
import subprocess
import threading
import time
import unittest
import warnings

import pydicom

from common import SOURCE_ROOT, STRAYLINE, tempdir
from test_scan import EXAMPLES, MODEL, copy_pair

STORESCU = shutil.which("storescu")
ECHOSCU = shutil.which("echoscu")
AET = "STRAYTEST"
CALLER = "TPS1"


def free_port():
    s = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
    s.bind(("127.0.0.1", 0))
    port = s.getsockname()[1]
    s.close()
    return port


def echo(port, calling=CALLER, timeout=10):
    p = subprocess.run([ECHOSCU, "-aet", calling, "-aec", AET, "-to", "5", "127.0.0.1",
                        str(port)], capture_output=True, text=True, timeout=timeout)
    return p.returncode


def store(port, *files, calling=CALLER):
    return subprocess.run([STORESCU, "-aet", calling, "-aec", AET, "-to", "10", "127.0.0.1",
                           str(port)] + list(files), capture_output=True, text=True,
                          timeout=120)


class Node:
    """A running `strayline listen` on a free loopback port."""

    def __init__(self, out, *extra):
        self.out = out
        self.port = free_port()
        self.errpath = os.path.join(os.path.dirname(out), "listen-%d.log" % self.port)
        self.errfile = open(self.errpath, "w")
        self.proc = subprocess.Popen(
            [STRAYLINE, "listen", "--port", str(self.port), "--ae-title", AET, "--allow-aet",
             CALLER, "--allow-aet", "TPS2", "--model", MODEL, "--out", out] + list(extra),
            stdout=subprocess.DEVNULL, stderr=self.errfile)
        for _ in range(100):  # at most about 10 s
            if self.proc.poll() is not None:
                raise AssertionError("listen exited early:\n" + self.log())
            if echo(self.port) == 0:
                return
            time.sleep(0.1)
        self.stop()
        raise AssertionError("listen did not answer echoscu")

    def log(self):
        if not self.errfile.closed:
            self.errfile.flush()
        with open(self.errpath) as f:
            return f.read()

    def wait_for(self, predicate, seconds=30):
        end = time.time() + seconds
        while time.time() < end:
            if predicate():
                return True
            time.sleep(0.1)
        return False

    def reports(self):
        return sorted(glob.glob(os.path.join(self.out, "*.json")))

    def stop(self):
        if self.proc.poll() is None:
            self.proc.send_signal(signal.SIGTERM)
            try:
                self.proc.wait(timeout=30)
            except subprocess.TimeoutExpired:
                self.proc.kill()
                self.proc.wait(timeout=10)
        if not self.errfile.closed:
            self.errfile.close()
        return self.proc.returncode


def plan_uid(path):
    return pydicom.dcmread(path, stop_before_pixels=True).SOPInstanceUID


def report_names(out):
    return sorted(os.path.basename(p) for p in glob.glob(os.path.join(out, "*_*.json")))


def log_plan_uids(out):
    con = sqlite3.connect(os.path.join(out, "screening.sqlite"))
    try:
        return sorted(r[0] for r in con.execute("SELECT plan_uid FROM screening"))
    finally:
        con.close()


@unittest.skipUnless(STORESCU and ECHOSCU, "DCMTK's storescu and echoscu (Debian dcmtk)")
class Listen(unittest.TestCase):
    def setUp(self):
        self.tmp = tempdir()
        self.out = os.path.join(self.tmp.name, "out")
        self.node = None

    def tearDown(self):
        if self.node:
            self.node.stop()
        self.tmp.cleanup()

    def start(self, *extra):
        self.node = Node(self.out, *extra)
        return self.node

    def screened(self, n):
        return self.node.wait_for(lambda: len(report_names(self.out)) >= n
                                  and os.path.exists(os.path.join(self.out, "summary.json")))

    def test_one_association_plan_first(self):
        node = self.start()
        face = os.path.join(EXAMPLES, "face-lens")
        p = store(node.port, os.path.join(face, "rtplan.dcm"), os.path.join(face, "rtstruct.dcm"))
        self.assertEqual(p.returncode, 0, p.stderr)
        self.assertTrue(self.screened(1), node.log())
        uid = plan_uid(os.path.join(face, "rtplan.dcm"))
        self.assertTrue(node.wait_for(lambda: log_plan_uids(self.out) == [uid]), node.log())
        self.assertEqual(node.stop(), 0)
        self.assertIn("stopped", node.log())
        with open(os.path.join(self.out, "summary.json")) as f:
            s = json.load(f)
        self.assertEqual([x["plan_uid"] for x in s["plans"]], [uid])
        self.assertTrue(s["plans"][0]["flagged"])
        # stored under the SOP Instance UIDs pydicom reads, once each
        stored = sorted(os.listdir(os.path.join(self.out, "received")))
        ss_uid = plan_uid(os.path.join(face, "rtstruct.dcm"))
        self.assertEqual(stored, sorted([uid + ".dcm", ss_uid + ".dcm"]))
        self.assertEqual(plan_uid(os.path.join(self.out, "received", uid + ".dcm")), uid)
        # the folder the node made holds patient data: no access for other
        # users (POSIX permission bits), the store for the owner alone
        self.assertEqual(os.stat(self.out).st_mode & 0o007, 0)
        self.assertEqual(os.stat(os.path.join(self.out, "received")).st_mode & 0o077, 0)

    def test_a_summary_that_cannot_be_written_does_not_stop_the_node(self):
        """summary.csv's name taken by a folder (as a full disk fails the
        write): the node logs it and goes on answering and screening, and
        writes the summary once it can (found by an independent review: a
        full disk stopped the node, exit 1, every later export refused)."""
        os.makedirs(os.path.join(self.out, "summary.csv", "taken"))
        node = self.start()
        face = os.path.join(EXAMPLES, "face-lens")
        p = store(node.port, os.path.join(face, "rtplan.dcm"), os.path.join(face, "rtstruct.dcm"))
        self.assertEqual(p.returncode, 0, p.stderr)
        self.assertTrue(node.wait_for(lambda: "tried again" in node.log()), node.log())
        self.assertIsNone(node.proc.poll(), node.log())
        self.assertEqual(echo(node.port), 0)
        shutil.rmtree(os.path.join(self.out, "summary.csv"))
        self.assertTrue(node.wait_for(
            lambda: os.path.isfile(os.path.join(self.out, "summary.csv"))), node.log())
        self.assertTrue(node.wait_for(lambda: "written again" in node.log()), node.log())
        self.assertEqual(node.stop(), 0, node.log())

    def test_port_in_use(self):
        node = self.start()
        p = subprocess.run([STRAYLINE, "listen", "--port", str(node.port), "--ae-title", AET,
                            "--allow-aet", CALLER, "--model", MODEL, "--out",
                            os.path.join(self.tmp.name, "out2")], capture_output=True,
                           text=True, timeout=30)
        self.assertEqual(p.returncode, 2)
        self.assertIn("port %d: cannot listen" % node.port, p.stderr)
        self.assertEqual(echo(node.port), 0)  # the first node is untouched

    def test_two_associations_structures_first(self):
        node = self.start()
        neck = os.path.join(EXAMPLES, "neck-device")
        p = store(node.port, os.path.join(neck, "rtstruct.dcm"))
        self.assertEqual(p.returncode, 0, p.stderr)
        time.sleep(0.5)
        self.assertEqual(report_names(self.out), [])
        p = store(node.port, os.path.join(neck, "rtplan.dcm"), calling="TPS2")
        self.assertEqual(p.returncode, 0, p.stderr)
        self.assertTrue(self.screened(1), node.log())
        self.assertEqual(log_plan_uids(self.out), [plan_uid(os.path.join(neck, "rtplan.dcm"))])

    def test_two_associations_plan_first_and_incomplete_report(self):
        node = self.start("--incomplete-after", "1")
        face = os.path.join(EXAMPLES, "face-lens")
        self.assertEqual(store(node.port, os.path.join(face, "rtplan.dcm")).returncode, 0)
        self.assertTrue(node.wait_for(lambda: "incomplete" in node.log(), 15), node.log())
        self.assertTrue(node.wait_for(lambda: self.outcomes() == ["incomplete"], 15))
        self.assertEqual(store(node.port, os.path.join(face, "rtstruct.dcm")).returncode, 0)
        self.assertTrue(self.screened(1), node.log())
        self.assertTrue(node.wait_for(lambda: self.outcomes() == ["screened"], 15))

    def outcomes(self):
        try:
            with open(os.path.join(self.out, "summary.json")) as f:
                return [p["outcome"] for p in json.load(f)["plans"]]
        except (OSError, ValueError):
            return None

    def test_bad_data_set_answered_with_failure(self):
        """A data set whose SOP Instance UID breaks the UID grammar (PS3.5
        9.1) is refused, logged, not stored, and the node keeps answering."""
        node = self.start()
        bad = os.path.join(self.tmp.name, "bad.dcm")
        ds = pydicom.dcmread(os.path.join(EXAMPLES, "face-lens", "rtplan.dcm"))
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # pydicom rightly warns of the bad UID
            ds.SOPInstanceUID = "1.2.03.x"
            ds.file_meta.MediaStorageSOPInstanceUID = "1.2.03.x"
            ds.save_as(bad, write_like_original=True)
        p = store(node.port, bad)
        self.assertTrue(node.wait_for(lambda: "refused" in node.log(), 15), node.log())
        self.assertIn("not a valid UID", node.log())
        self.assertEqual([f for f in os.listdir(os.path.join(self.out, "received"))], [])
        self.assertEqual(echo(node.port), 0)

    def test_same_uid_other_content_refused(self):
        """The face-lens plan, then the same plan with three times the MU under
        its old SOP Instance UID (pydicom): the second is refused with a
        failure status and logged; the stored file stays the first, compared
        element by element with pydicom (found by an independent review: it
        was answered 'stored once', and the old screening stood for the edited
        plan). The same plan sent again is still a plain duplicate."""
        node = self.start()
        face = os.path.join(EXAMPLES, "face-lens")
        first = os.path.join(face, "rtplan.dcm")
        edited = os.path.join(self.tmp.name, "edited.dcm")
        ds = pydicom.dcmread(first)
        for b in ds.FractionGroupSequence[0].ReferencedBeamSequence:
            b.BeamMeterset = float(b.BeamMeterset) * 3
        ds.save_as(edited, write_like_original=True)
        self.assertEqual(store(node.port, first).returncode, 0)
        uid = plan_uid(first)
        stored = os.path.join(self.out, "received", uid + ".dcm")
        self.assertTrue(node.wait_for(lambda: os.path.exists(stored)), node.log())
        store(node.port, edited)
        self.assertTrue(node.wait_for(lambda: "differs from this one" in node.log(), 15),
                        node.log())
        self.assertEqual(pydicom.dcmread(stored).FractionGroupSequence[0]
                         .ReferencedBeamSequence[0].BeamMeterset,
                         pydicom.dcmread(first).FractionGroupSequence[0]
                         .ReferencedBeamSequence[0].BeamMeterset)
        self.assertEqual(store(node.port, first).returncode, 0)
        self.assertTrue(node.wait_for(lambda: "again: stored once" in node.log(), 15),
                        node.log())
        self.assertEqual(echo(node.port), 0)

    def test_unknown_caller_refused(self):
        node = self.start()
        self.assertNotEqual(echo(node.port, calling="INTRUDER"), 0)
        face = os.path.join(EXAMPLES, "face-lens")
        p = store(node.port, os.path.join(face, "rtplan.dcm"), calling="INTRUDER")
        self.assertNotEqual(p.returncode, 0)
        self.assertIn("'INTRUDER'", node.log())
        self.assertIn("not on the allow list", node.log())
        self.assertEqual(os.listdir(os.path.join(self.out, "received")), [])

    def test_wrong_called_title_refused(self):
        """An allowed caller that calls another AE title than the node's is
        refused (PS3.8: Called AE Title not recognised) and logged (found by
        an independent review: any called title was accepted)."""
        node = self.start()
        p = subprocess.run([ECHOSCU, "-aet", CALLER, "-aec", "WRONGTITLE", "-to", "5",
                            "127.0.0.1", str(node.port)], capture_output=True, text=True,
                           timeout=10)
        self.assertNotEqual(p.returncode, 0)
        self.assertTrue(node.wait_for(lambda: "called AE title 'WRONGTITLE'" in node.log(), 10),
                        node.log())
        self.assertEqual(echo(node.port), 0)

    def test_no_allow_list_refuses_to_start(self):
        p = subprocess.run([STRAYLINE, "listen", "--port", str(free_port()), "--ae-title", AET,
                            "--model", MODEL, "--out", self.out], capture_output=True, text=True,
                           timeout=30)
        self.assertEqual(p.returncode, 2)
        self.assertIn("allow", p.stderr)

    def test_twenty_senders(self):
        """10 pairs with their own UIDs, each sent by two storescu at once:
        every object stored once, every plan screened once, every report whole."""
        node = self.start()
        src = os.path.join(self.tmp.name, "src")
        pairs = []
        for i in range(10):
            d = os.path.join(src, "c%d" % i)
            uid, ss, pid = copy_pair(["face-lens", "neck-device"][i % 2], d, "S%d" % i)
            pairs.append((d, uid, ss))
        results = [None] * 20

        def send(k):
            d = pairs[k // 2][0]
            files = [os.path.join(d, "rtplan.dcm"), os.path.join(d, "rtstruct.dcm")]
            if k % 2:
                files.reverse()
            results[k] = store(node.port, *files, calling=CALLER if k % 2 else "TPS2")

        threads = [threading.Thread(target=send, args=(k,)) for k in range(20)]
        readers = []
        reading = [True]

        def read_history():
            # the log read by `history` while the node writes it (WAL mode)
            while reading[0] and len(readers) < 200:
                p = subprocess.run([STRAYLINE, "history", "--log",
                                    os.path.join(self.out, "screening.sqlite"), "--format",
                                    "json"], capture_output=True, text=True, timeout=60)
                readers.append((p.returncode, p.stdout, p.stderr))
                time.sleep(0.05)

        reader = threading.Thread(target=read_history)
        reader.start()
        for t in threads:
            t.start()
        for t in threads:
            t.join(timeout=180)
        for r in results:
            self.assertIsNotNone(r)
            self.assertEqual(r.returncode, 0, r.stderr)
        self.assertTrue(node.wait_for(lambda: len(report_names(self.out)) >= 10, 120),
                        node.log())
        self.assertTrue(node.wait_for(lambda: len(log_plan_uids(self.out)) >= 10, 60))
        reading[0] = False
        reader.join(timeout=120)
        self.assertTrue(readers)
        for rc, out, err in readers:
            self.assertEqual(rc, 0, err)
            json.loads(out)
        self.assertEqual(node.stop(), 0)
        stored = sorted(os.listdir(os.path.join(self.out, "received")))
        expect = sorted([u + ".dcm" for _, u, _ in pairs] + [s + ".dcm" for _, _, s in pairs])
        self.assertEqual(stored, expect)
        self.assertEqual(log_plan_uids(self.out), sorted(u for _, u, _ in pairs))
        for name in report_names(self.out):
            with open(os.path.join(self.out, name)) as f:
                json.load(f)  # whole
        self.assertEqual(len(report_names(self.out)), 10)

    def test_a_silent_connection_holds_others_briefly(self):
        """A peer that connects and sends nothing (a port scanner, a hung
        sender): the association request is read on the listening thread,
        so it holds every other sender, for at most the association timeout
        (5 s), not the network timeout (60 s by default; found by an
        independent review: a 25 s silent connection delayed a store by
        25.6 s). echoscu must answer within 5 s + margin."""
        node = self.start()
        silent = socket.create_connection(("127.0.0.1", node.port), timeout=30)
        try:
            time.sleep(0.3)  # the node is now waiting on the silent peer
            t0 = time.monotonic()
            self.assertEqual(echo(node.port, timeout=30), 0, node.log())
            self.assertLess(time.monotonic() - t0, 9.0)
        finally:
            silent.close()
        self.assertEqual(echo(node.port), 0)

    def test_aborted_association_leaves_no_file(self):
        """storescu's connection cut after 64 KiB of an 800 KB structure set
        (a byte-forwarding proxy on loopback): nothing stored, no temporary
        file left, and the node still answers echoscu."""
        node = self.start()
        lsock = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
        lsock.bind(("127.0.0.1", 0))
        lsock.listen(1)
        lsock.settimeout(30)
        proxy_port = lsock.getsockname()[1]
        cut_after = 64 * 1024

        def proxy():
            try:
                c, _ = lsock.accept()
            except OSError:
                return
            s = socket.create_connection(("127.0.0.1", node.port), timeout=30)
            c.settimeout(30)
            s.settimeout(30)
            sent = [0]

            def back():
                try:
                    while True:
                        b = s.recv(65536)
                        if not b:
                            break
                        c.sendall(b)
                except OSError:
                    pass

            t = threading.Thread(target=back)
            t.start()
            try:
                while sent[0] < cut_after:
                    b = c.recv(min(8192, cut_after - sent[0]))
                    if not b:
                        break
                    s.sendall(b)
                    sent[0] += len(b)
            except OSError:
                pass
            # a TCP reset, as a crashed or unplugged sender leaves it
            for sock in (s, c):
                try:
                    sock.setsockopt(socket.SOL_SOCKET, socket.SO_LINGER,
                                    b"\x01\x00\x00\x00\x00\x00\x00\x00")
                    sock.close()
                except OSError:
                    pass
            t.join(timeout=30)

        pt = threading.Thread(target=proxy)
        pt.start()
        face = os.path.join(EXAMPLES, "face-lens")
        p = store(proxy_port, os.path.join(face, "rtstruct.dcm"))
        pt.join(timeout=60)
        lsock.close()
        self.assertNotEqual(p.returncode, 0)
        self.assertTrue(node.wait_for(lambda: "not completed" in node.log(), 30), node.log())
        self.assertEqual(os.listdir(os.path.join(self.out, "received")), [])
        self.assertEqual(echo(node.port), 0)
        # the same object sent whole afterwards is stored
        self.assertEqual(store(node.port, os.path.join(face, "rtstruct.dcm")).returncode, 0)
        self.assertEqual(len(os.listdir(os.path.join(self.out, "received"))), 1)

    def test_sigterm_waits_for_current_association(self):
        node = self.start()
        face = os.path.join(EXAMPLES, "face-lens")
        sender = subprocess.Popen([STORESCU, "-aet", CALLER, "-aec", AET, "127.0.0.1",
                                   str(node.port), os.path.join(face, "rtstruct.dcm"),
                                   os.path.join(face, "rtplan.dcm")],
                                  stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        self.assertTrue(node.wait_for(lambda: "association accepted" in node.log(), 30))
        node.proc.send_signal(signal.SIGTERM)
        self.assertEqual(sender.wait(timeout=60), 0)
        self.assertEqual(node.proc.wait(timeout=60), 0)
        log = node.log()
        self.assertIn("stopping", log)
        self.assertIn("stopped", log)
        # what arrived before the stop was still screened
        self.assertEqual(len(report_names(self.out)), 1, log)

    def test_restart_picks_up_what_waits_in_the_store(self):
        """A second run screens what the first left in its store: a plan
        whose structure set arrives only now, and a pair stored but never
        screened (as if the node had been killed first; written here with
        pydicom under the node's own names); a plan the screening log
        (Python's sqlite3) already holds is not screened again. The store is
        listed before the node listens (found by an independent review: a
        plan received during the listing could be screened twice)."""
        face = os.path.join(EXAMPLES, "face-lens")
        fetus = os.path.join(EXAMPLES, "chest-fetus")
        node = self.start("--incomplete-after", "600")
        self.assertEqual(store(node.port, os.path.join(face, "rtplan.dcm"),
                               os.path.join(face, "rtstruct.dcm")).returncode, 0)
        self.assertTrue(self.screened(1), node.log())
        self.assertEqual(store(node.port, os.path.join(fetus, "rtplan.dcm")).returncode, 0)
        received = os.path.join(self.out, "received")
        self.assertTrue(node.wait_for(lambda: len(os.listdir(received)) == 3), node.log())
        self.assertEqual(node.stop(), 0)
        face_uid = plan_uid(os.path.join(face, "rtplan.dcm"))
        self.assertEqual(log_plan_uids(self.out), [face_uid])
        # a pair that reached the store but was never screened
        d = os.path.join(self.tmp.name, "unscreened")
        neck_uid, neck_ss, _ = copy_pair("neck-device", d, "LEFT")
        shutil.copy(os.path.join(d, "rtplan.dcm"), os.path.join(received, neck_uid + ".dcm"))
        shutil.copy(os.path.join(d, "rtstruct.dcm"), os.path.join(received, neck_ss + ".dcm"))

        node = self.start("--incomplete-after", "600")
        fetus_uid = plan_uid(os.path.join(fetus, "rtplan.dcm"))
        self.assertTrue(node.wait_for(lambda: neck_uid in log_plan_uids(self.out)), node.log())
        lines = node.log().splitlines()
        start = [l for l in lines if "start-up:" in l]
        self.assertEqual(len(start), 1, node.log())
        # the store is listed before the node listens: a plan arriving
        # meanwhile would be queued by both and screened twice
        listening = [i for i, l in enumerate(lines) if "listening on port" in l]
        self.assertEqual(len(listening), 1, node.log())
        self.assertLess(lines.index(start[0]), listening[0], node.log())
        self.assertIn("3 plans and 2 structure sets", start[0])
        self.assertIn("1 plan already in the screening log", start[0])
        self.assertIn("2 to pair and screen now", start[0])
        # the fetus plan waited; its structure set arrives now
        self.assertEqual(store(node.port, os.path.join(fetus, "rtstruct.dcm")).returncode, 0)
        self.assertTrue(node.wait_for(lambda: fetus_uid in log_plan_uids(self.out)), node.log())
        self.assertEqual(node.stop(), 0)
        self.assertEqual(log_plan_uids(self.out), sorted([face_uid, neck_uid, fetus_uid]))

    def test_log_has_timestamps_and_no_patient_names(self):
        node = self.start()
        d = os.path.join(self.tmp.name, "named")
        copy_pair("face-lens", d, "NAMED")
        files = [os.path.join(d, "rtplan.dcm"), os.path.join(d, "rtstruct.dcm")]
        for f in files:  # an invented name found nowhere else in the files
            ds = pydicom.dcmread(f)
            ds.PatientName = "Qzinvented^Vxname"
            ds.save_as(f, write_like_original=True)
        self.assertEqual(store(node.port, *files).returncode, 0)
        self.assertTrue(self.screened(1))
        node.stop()
        log = node.log()
        self.assertIn("screened patient ID", log)
        self.assertNotIn("Qzinvented", log)
        self.assertNotIn("Vxname", log)
        for line in log.splitlines():
            self.assertRegex(line, r"^strayline listen: \d{4}-\d\d-\d\dT\d\d:\d\d:\d\dZ ")


if __name__ == "__main__":
    unittest.main()
