/*
 * The receiving DICOM node of `listen` (storescp.h): a pool of DCMTK dcmnet
 * SCP threads, one per association, that accept RT Plan and RT Structure
 * Set Storage and Verification from allowed calling AE titles only.
 *
 * DCMTK's DcmSCPPool builds its workers with a default constructor, which
 * leaves no way to hand them this node's settings without global state, so
 * the pool here is DcmBaseSCPPool with its own createSCPWorker(). Each
 * C-STORE is received straight into a temporary file of the store folder
 * (mkstemp: private permissions, an unpredictable name) and linked to its
 * final name "<SOP Instance UID>.dcm" only after the data set is whole, the
 * UID grammar holds and the header agrees with the request. link() fails
 * when the name exists, so two associations delivering the same object at
 * once still store it once; a failed or aborted transfer unlinks its
 * temporary file. The listen loop polls (non-blocking accept with a 1 s
 * timeout), so a stop request is seen within a second.
 */
#include "strayline/storescp.h"

#include "strayline/dicomhead.h"

#include <dcmtk/config/osconfig.h>
#include <dcmtk/dcmdata/dctk.h>
#include <dcmtk/dcmnet/diutil.h>
#include <dcmtk/dcmnet/scppool.h>
#include <dcmtk/dcmnet/scpthrd.h>
#include <dcmtk/oflog/oflog.h>

#include <atomic>
#include <cerrno>
#include <climits>
#include <cstdio>
#include <cstring>
#include <dirent.h>
#include <netinet/in.h>
#include <sys/socket.h>
#include <mutex>
#include <new>
#include <pthread.h>
#include <string>
#include <unistd.h>
#include <vector>

namespace {

const char *const UID_RTPLAN = "1.2.840.10008.5.1.4.1.1.481.5";
const char *const UID_RTSTRUCT = "1.2.840.10008.5.1.4.1.1.481.3";
const char *const TMP_PREFIX = ".incoming-";

struct node_ctx {
    std::string ae_title;
    std::vector<std::string> allowed;
    std::string dir;
    sl_scp_callback cb;
    void *cb_ctx;
};

void emit(const node_ctx *c, sl_scp_event_kind kind, const std::string &text,
          const char *calling = nullptr, const char *path = nullptr,
          const char *cls = nullptr, const char *uid = nullptr)
{
    if (!c->cb)
        return;
    /* one event, one log line: DCMTK's condition texts can hold line breaks */
    std::string line;
    for (char ch : text)
        line += ch == '\n' ? std::string("; ") : ch == '\r' ? std::string() : std::string(1, ch);
    sl_scp_event ev = {kind, line.c_str(), calling, path, cls, uid};
    c->cb(&ev, c->cb_ctx);
}

std::string trim(const OFString &s)
{
    std::string t(s.c_str());
    size_t a = t.find_first_not_of(' '), b = t.find_last_not_of(' ');
    return a == std::string::npos ? std::string() : t.substr(a, b - a + 1);
}

/* What a name from the network may look like in a log line. */
std::string printable(const std::string &s)
{
    std::string o;
    for (unsigned char ch : s)
        o += ch >= 0x20 && ch < 0x7F ? static_cast<char>(ch) : '?';
    return o;
}

class rt_store_scp : public DcmThreadSCP {
public:
    explicit rt_store_scp(const node_ctx *c) : ctx(c) {}

protected:
    OFBool checkCallingAETitleAccepted(const OFString &calling) override
    {
        std::string ae = trim(calling);
        for (const std::string &a : ctx->allowed)
            if (a == ae)
                return OFTrue;
        emit(ctx, SL_SCP_EV_REFUSED,
             "association refused: calling AE title '" + printable(ae) + "' from " +
                 printable(getPeerIP().c_str()) + " is not on the allow list");
        return OFFalse;
    }

    /* a sender configured for another node (a typing slip in the planning
     * system's export, or a node meant for something else) is refused too */
    OFBool checkCalledAETitleAccepted(const OFString &called) override
    {
        std::string ae = trim(called);
        if (ae == ctx->ae_title)
            return OFTrue;
        emit(ctx, SL_SCP_EV_REFUSED,
             "association refused: called AE title '" + printable(ae) + "' from " +
                 printable(getPeerIP().c_str()) + " is not this node's ('" + ctx->ae_title +
                 "')");
        return OFFalse;
    }

    void notifyAssociationAcknowledge() override
    {
        std::string ae = printable(trim(getPeerAETitle()));
        emit(ctx, SL_SCP_EV_ASSOCIATION,
             "association accepted from '" + ae + "' (" + printable(getPeerIP().c_str()) + ")",
             ae.c_str());
    }

    void notifyAbortRequest() override
    {
        emit(ctx, SL_SCP_EV_INFO,
             "association aborted by '" + printable(trim(getPeerAETitle())) + "'");
    }

    void notifyReleaseRequest() override
    {
        emit(ctx, SL_SCP_EV_INFO,
             "association released by '" + printable(trim(getPeerAETitle())) + "'");
    }

    OFCondition handleIncomingCommand(T_DIMSE_Message *msg,
                                      const DcmPresentationContextInfo &info) override
    {
        if (msg->CommandField != DIMSE_C_STORE_RQ)
            return DcmThreadSCP::handleIncomingCommand(msg, info);
        T_DIMSE_C_StoreRQ &req = msg->msg.CStoreRQ;
        std::string ae = printable(trim(getPeerAETitle()));
        std::string cls(req.AffectedSOPClassUID), uid(req.AffectedSOPInstanceUID);
        std::string shown = sl_dicom_uid_valid(uid.c_str()) ? uid : "(an invalid UID)";
        if (cls != UID_RTPLAN && cls != UID_RTSTRUCT) {
            emit(ctx, SL_SCP_EV_FAILED,
                 "C-STORE refused: SOP Class " + printable(cls) + " is not accepted here",
                 ae.c_str());
            return sendSTOREResponse(info.presentationContextID, req,
                                     STATUS_STORE_Refused_SOPClassNotSupported);
        }
        std::string tmpl = ctx->dir + "/" + TMP_PREFIX + "XXXXXX";
        std::vector<char> tmp(tmpl.begin(), tmpl.end());
        tmp.push_back('\0');
        int fd = mkstemp(tmp.data());
        if (fd < 0) {
            emit(ctx, SL_SCP_EV_FAILED,
                 "C-STORE of " + shown + " refused: cannot create a file in " + ctx->dir + ": " +
                     strerror(errno),
                 ae.c_str());
            return sendSTOREResponse(info.presentationContextID, req,
                                     STATUS_STORE_Refused_OutOfResources);
        }
        close(fd);
        OFCondition cond = receiveSTORERequest(req, info.presentationContextID,
                                               OFString(tmp.data()));
        if (cond.bad()) {
            unlink(tmp.data());
            emit(ctx, SL_SCP_EV_FAILED,
                 "C-STORE of " + shown + " not completed (" + cond.text() +
                     "): nothing stored",
                 ae.c_str());
            /* a local failure (a full disk) leaves the peer waiting for an
             * answer; after an abort this send simply fails */
            if (cond != DUL_PEERABORTEDASSOCIATION && cond != DUL_PEERREQUESTEDRELEASE)
                sendSTOREResponse(info.presentationContextID, req,
                                  STATUS_STORE_Refused_OutOfResources);
            return cond;
        }
        Uint16 status = commit(tmp.data(), cls, uid, shown, ae);
        return sendSTOREResponse(info.presentationContextID, req, status);
    }

private:
    /* Check the received file and give it its final name. */
    Uint16 commit(const char *tmp, const std::string &cls, const std::string &uid,
                  const std::string &shown, const std::string &ae)
    {
        sl_dicom_head head;
        sl_error err = {};
        if (!sl_dicom_uid_valid(uid.c_str())) {
            unlink(tmp);
            emit(ctx, SL_SCP_EV_FAILED,
                 "C-STORE refused: Affected SOP Instance UID is not a valid UID", ae.c_str());
            return STATUS_STORE_Error_CannotUnderstand;
        }
        if (sl_dicom_read_head(tmp, &head, &err) != SL_OK) {
            unlink(tmp);
            emit(ctx, SL_SCP_EV_FAILED,
                 "C-STORE of " + shown + " refused: the data set cannot be read: " + err.msg,
                 ae.c_str());
            return STATUS_STORE_Error_CannotUnderstand;
        }
        if (cls != head.sop_class_uid || uid != head.sop_instance_uid) {
            unlink(tmp);
            emit(ctx, SL_SCP_EV_FAILED,
                 "C-STORE of " + shown +
                     " refused: the data set's SOP Class or Instance UID differs from the "
                     "request",
                 ae.c_str());
            return STATUS_STORE_Error_DataSetDoesNotMatchSOPClass;
        }
        std::string final_path = ctx->dir + "/" + uid + ".dcm";
        if (link(tmp, final_path.c_str()) != 0) {
            int e = errno;
            const char *tmp_keep = tmp; /* compared with the stored copy below */
            if (e != EEXIST)
                unlink(tmp);
            if (e == EEXIST) {
                if (sl_dicom_same_data_set(tmp_keep, final_path.c_str())) {
                    unlink(tmp_keep);
                    emit(ctx, SL_SCP_EV_DUPLICATE, "received " + uid + " again: stored once",
                         ae.c_str(), final_path.c_str(), cls.c_str(), uid.c_str());
                    return STATUS_Success;
                }
                /* an edited object re-sent under its old UID: the screening
                 * of the stored one would stand for it, so it is refused */
                unlink(tmp_keep);
                emit(ctx, SL_SCP_EV_FAILED,
                     "C-STORE of " + uid +
                         " refused: another data set with this SOP Instance UID is stored "
                         "already and differs from this one (an edited object must have a new "
                         "UID); the stored one stands",
                     ae.c_str());
                return STATUS_STORE_Error_CannotUnderstand;
            }
            emit(ctx, SL_SCP_EV_FAILED,
                 "C-STORE of " + uid + " refused: cannot store it: " + strerror(e), ae.c_str());
            return STATUS_STORE_Refused_OutOfResources;
        }
        unlink(tmp);
        emit(ctx, SL_SCP_EV_STORED,
             std::string("stored ") + (cls == UID_RTPLAN ? "RT Plan " : "RT Structure Set ") +
                 uid + " from '" + ae + "'",
             ae.c_str(), final_path.c_str(), cls.c_str(), uid.c_str());
        return STATUS_Success;
    }

    const node_ctx *ctx;
};

class rt_pool;

struct rt_worker : public DcmBaseSCPPool::DcmBaseSCPWorker, private rt_store_scp {
    rt_worker(DcmBaseSCPPool &pool, const node_ctx *c)
        : DcmBaseSCPPool::DcmBaseSCPWorker(pool), rt_store_scp(c)
    {
    }
    OFCondition setSharedConfig(const DcmSharedSCPConfig &config) override
    {
        return rt_store_scp::setSharedConfig(config);
    }
    OFBool busy() override { return rt_store_scp::isConnected(); }

protected:
    OFCondition workerListen(T_ASC_Association *const assoc) override
    {
        return rt_store_scp::run(assoc);
    }
};

class rt_pool : public DcmBaseSCPPool {
public:
    explicit rt_pool(const node_ctx *c) : ctx(c) {}

protected:
    DcmBaseSCPWorker *createSCPWorker() override
    {
        return new (std::nothrow) rt_worker(*this, ctx);
    }

private:
    const node_ctx *ctx;
};

void quiet()
{
    static std::once_flag once;
    std::call_once(once, [] { OFLog::configure(OFLogger::FATAL_LOG_LEVEL); });
}

/* Temporary files left by a run that was killed mid-transfer. */
void remove_leftovers(const std::string &dir)
{
    DIR *d = opendir(dir.c_str());
    if (!d)
        return;
    while (struct dirent *e = readdir(d))
        if (strncmp(e->d_name, TMP_PREFIX, strlen(TMP_PREFIX)) == 0)
            unlink((dir + "/" + e->d_name).c_str());
    closedir(d);
}

} // namespace

struct sl_scp {
    node_ctx ctx;
    rt_pool *pool = nullptr;
    pthread_t thread{};
    std::atomic<bool> finished{false};
    OFCondition result;
    std::string result_text;
};

namespace {

void *listen_thread(void *arg)
{
    sl_scp *s = static_cast<sl_scp *>(arg);
    try {
        OFCondition c = s->pool->listen();
        s->result_text = c.bad() ? c.text() : "";
        s->result = c;
    } catch (...) {
        s->result_text = "unexpected failure in DCMTK";
        s->result = EC_IllegalCall;
    }
    s->finished = true;
    return nullptr;
}

} // namespace

extern "C" {

int sl_ae_title_valid(const char *t)
{
    size_t n = t ? strlen(t) : 0;
    if (n == 0 || n > 16)
        return 0;
    bool any = false;
    for (size_t i = 0; i < n; i++) {
        unsigned char c = static_cast<unsigned char>(t[i]);
        if (c < 0x20 || c >= 0x7F || c == '\\')
            return 0;
        any |= c != ' ';
    }
    return any;
}

sl_status sl_scp_start(const sl_scp_config *cfg, sl_scp **out, sl_error *err)
{
    *out = nullptr;
    quiet();
    if (cfg->port < 1 || cfg->port > 65535)
        return sl_error_set(err, SL_EUSAGE, "port %d: needs 1 to 65535", cfg->port);
    if (!sl_ae_title_valid(cfg->ae_title))
        return sl_error_set(err, SL_EUSAGE, "AE title '%s': needs 1 to 16 printable characters, "
                                            "no backslash",
                            cfg->ae_title ? cfg->ae_title : "");
    if (cfg->nallowed == 0)
        return sl_error_set(err, SL_EUSAGE, "no allowed calling AE title: a node that accepts "
                                            "anyone is never started");
    for (size_t i = 0; i < cfg->nallowed; i++)
        if (!sl_ae_title_valid(cfg->allowed[i]))
            return sl_error_set(err, SL_EUSAGE, "allowed AE title '%s': needs 1 to 16 printable "
                                                "characters, no backslash",
                                cfg->allowed[i]);
    /* the pool opens its port on its own thread: try the port here first,
     * so that a port in use is an error of the start, not of the run */
    int probe = socket(AF_INET, SOCK_STREAM | SOCK_CLOEXEC, 0);
    if (probe >= 0) {
        int one = 1;
        setsockopt(probe, SOL_SOCKET, SO_REUSEADDR, &one, sizeof one);
        struct sockaddr_in a = {};
        a.sin_family = AF_INET;
        a.sin_port = htons(static_cast<uint16_t>(cfg->port));
        a.sin_addr.s_addr = htonl(INADDR_ANY);
        int rc = bind(probe, reinterpret_cast<struct sockaddr *>(&a), sizeof a);
        int e = errno;
        close(probe);
        if (rc != 0)
            return sl_error_set(err, SL_EUSAGE, "port %d: cannot listen: %s (choose another "
                                                "--port)",
                                cfg->port, strerror(e));
    }
    sl_scp *s = new (std::nothrow) sl_scp;
    if (!s)
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    try {
        s->ctx.ae_title = trim(OFString(cfg->ae_title));
        for (size_t i = 0; i < cfg->nallowed; i++)
            s->ctx.allowed.push_back(trim(OFString(cfg->allowed[i])));
        s->ctx.dir = cfg->store_dir;
        s->ctx.cb = cfg->callback;
        s->ctx.cb_ctx = cfg->ctx;
        remove_leftovers(s->ctx.dir);
        s->pool = new rt_pool(&s->ctx);
        DcmSCPConfig &c = s->pool->getConfig();
        c.setAETitle(cfg->ae_title);
        c.setPort(static_cast<Uint16>(cfg->port));
        c.setConnectionBlockingMode(DUL_NOBLOCK);
        c.setConnectionTimeout(1);
        c.setDIMSEBlockingMode(DIMSE_NONBLOCKING);
        c.setDIMSETimeout(static_cast<Uint32>(cfg->timeout_s > 0 ? cfg->timeout_s : 60));
        /* the association request is read on the listening thread: a peer
         * that connects and says nothing holds every other sender for this
         * long (found by an independent review: 60 s), so it is short, and
         * never longer than the DIMSE timeout */
        int acse = cfg->timeout_s > 0 && cfg->timeout_s < SL_SCP_ACSE_TIMEOUT_S
                       ? cfg->timeout_s
                       : SL_SCP_ACSE_TIMEOUT_S;
        c.setACSETimeout(static_cast<Uint32>(acse));
        c.setHostLookupEnabled(OFFalse);
        c.setProgressNotificationMode(OFFalse);
        OFList<OFString> ts;
        ts.push_back(UID_LittleEndianExplicitTransferSyntax);
        ts.push_back(UID_LittleEndianImplicitTransferSyntax);
        OFCondition cond = c.addPresentationContext(UID_VerificationSOPClass, ts);
        if (cond.good())
            cond = c.addPresentationContext(UID_RTPlanStorage, ts);
        if (cond.good())
            cond = c.addPresentationContext(UID_RTStructureSetStorage, ts);
        if (cond.bad()) {
            delete s->pool;
            delete s;
            return sl_error_set(err, SL_EINTERNAL, "cannot configure the DICOM node: %s",
                                cond.text());
        }
        s->pool->setMaxThreads(static_cast<Uint16>(
            cfg->max_associations > 0 && cfg->max_associations < 1000 ? cfg->max_associations
                                                                        : 32));
    } catch (const std::bad_alloc &) {
        delete s->pool;
        delete s;
        return sl_error_set(err, SL_ENOMEM, "out of memory");
    }
    int rc = pthread_create(&s->thread, nullptr, listen_thread, s);
    if (rc != 0) {
        delete s->pool;
        delete s;
        return sl_error_set(err, SL_EINTERNAL, "cannot start the DICOM node: %s", strerror(rc));
    }
    *out = s;
    return SL_OK;
}

sl_status sl_scp_poll(sl_scp *s, sl_error *err)
{
    if (!s->finished)
        return SL_OK;
    return sl_error_set(err, SL_EIO, "the DICOM node on port %u stopped: %s",
                        static_cast<unsigned>(s->pool->getConfig().getPort()),
                        s->result_text.empty() ? "no reason given" : s->result_text.c_str());
}

void sl_scp_stop(sl_scp *s)
{
    if (!s)
        return;
    /* listen() resets its mode when it starts: ask until it has ended */
    while (!s->finished) {
        s->pool->stopAfterCurrentAssociations();
        usleep(50000);
    }
    pthread_join(s->thread, nullptr);
    delete s->pool;
    delete s;
}

} // extern "C"
