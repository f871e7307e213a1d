/*
 * strayline: a DICOM Storage SCP for RT Plans and RT Structure Sets, the
 * receiving side of `listen` (plain C API over DCMTK's dcmnet; the
 * implementation, src/dicom/store_scp.cc, is C++17).
 *
 * The node accepts RT Plan Storage, RT Structure Set Storage and
 * Verification (explicit and implicit little endian) from calling AE titles
 * on an allow list, and nothing else. Several associations run at once (one
 * thread each). Every object received is written to a temporary file in the
 * store folder and renamed to "<SOP Instance UID>.dcm" only once it is whole
 * and its UIDs pass the UID grammar, so an aborted association leaves no
 * file and no UID from the network becomes a path unchecked; an object
 * already stored is kept once. What happens is reported through a callback
 * (from the association threads); the library itself never prints.
 */
#ifndef STRAYLINE_STORESCP_H
#define STRAYLINE_STORESCP_H

#include <stddef.h>

#include "strayline/error.h"

#ifdef __cplusplus
extern "C" {
#endif

typedef enum sl_scp_event_kind {
    SL_SCP_EV_ASSOCIATION, /* an association accepted (text says from whom) */
    SL_SCP_EV_REFUSED,     /* an association refused (unknown calling AE title, ...) */
    SL_SCP_EV_STORED,      /* an object stored: path, class and instance UIDs set */
    SL_SCP_EV_DUPLICATE,   /* an object already stored: kept once */
    SL_SCP_EV_FAILED,      /* a C-STORE answered with a failure status, or aborted */
    SL_SCP_EV_INFO         /* anything else worth a log line (release, abort, echo) */
} sl_scp_event_kind;

typedef struct sl_scp_event {
    sl_scp_event_kind kind;
    const char *text;             /* one line, no patient names */
    const char *calling_ae;       /* may be NULL */
    const char *path;             /* STORED, DUPLICATE: the stored file */
    const char *sop_class_uid;    /* STORED, DUPLICATE */
    const char *sop_instance_uid; /* STORED, DUPLICATE */
} sl_scp_event;

typedef void (*sl_scp_callback)(const sl_scp_event *ev, void *ctx);

/* How long a peer that has connected may take to send its association
 * request (s): DCMTK's pool reads it on the listening thread, so a silent
 * connection holds every other sender for that long (a strayline
 * setting). */
#define SL_SCP_ACSE_TIMEOUT_S 5

typedef struct sl_scp_config {
    int port;                      /* 1..65535 */
    const char *ae_title;          /* this node's AE title (1..16 characters) */
    const char *const *allowed;    /* calling AE titles accepted; at least one */
    size_t nallowed;
    const char *store_dir;         /* an existing folder */
    int max_associations;          /* at once; more are refused as a local limit */
    int timeout_s;                 /* network timeout of a silent peer (s); the association
                                      request itself waits at most SL_SCP_ACSE_TIMEOUT_S */
    sl_scp_callback callback;
    void *ctx;
} sl_scp_config;

typedef struct sl_scp sl_scp;

/* Check the configuration and start listening on a thread of its own. A
 * usage error for a bad configuration (no allow list, a bad AE title). */
sl_status sl_scp_start(const sl_scp_config *cfg, sl_scp **out, sl_error *err);

/* SL_OK while the node listens; the error when it stopped by itself (the
 * port could not be opened, ...). */
sl_status sl_scp_poll(sl_scp *scp, sl_error *err);

/* Stop accepting, let the current associations finish, and wait for them;
 * then free. Safe to call on NULL. */
void sl_scp_stop(sl_scp *scp);

/* Is text a valid AE title (1..16 characters of the default repertoire, no
 * backslash, not only spaces)? */
int sl_ae_title_valid(const char *text);

#ifdef __cplusplus
}
#endif

#endif
