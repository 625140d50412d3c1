#include "io/nats_client.h"

#include <utility>
#include <vector>

#include "absl/strings/match.h"
#include "absl/strings/str_cat.h"
#include "aftershock/subject_token.h"

namespace aftershock::nats_internal {

absl::Status ToStatus(natsStatus s, absl::string_view what, jsErrCode jerr) {
  if (s == NATS_OK) return absl::OkStatus();
  // The thread's last error text is more precise than natsStatus_GetText
  // (e.g. "wrong last sequence: 7"); it belongs to this call when its code matches.
  natsStatus last = NATS_OK;
  const char* text = nats_GetLastError(&last);
  std::string detail = natsStatus_GetText(s);
  if (last == s && text != nullptr && text[0] != '\0') detail = text;
  if (jerr != 0) absl::StrAppend(&detail, " (JetStream error ", static_cast<int>(jerr), ")");
  const std::string msg = absl::StrCat(what, ": ", detail);
  if (jerr == JSStreamWrongLastSequenceErr || absl::StrContains(detail, "wrong last sequence") ||
      absl::StrContains(detail, "key exists")) {
    return absl::FailedPreconditionError(msg);
  }
  switch (s) {
    case NATS_NOT_FOUND:
      return absl::NotFoundError(msg);
    case NATS_TIMEOUT:
    case NATS_NO_SERVER:
    case NATS_CONNECTION_CLOSED:
    case NATS_CONNECTION_DISCONNECTED:
    case NATS_STALE_CONNECTION:
    case NATS_NO_RESPONDERS:
    case NATS_IO_ERROR:
      return absl::UnavailableError(msg);
    case NATS_INVALID_ARG:
    case NATS_INVALID_SUBJECT:
      return absl::InvalidArgumentError(msg);
    default:
      return absl::InternalError(msg);
  }
}

absl::StatusOr<std::unique_ptr<NatsSession>> NatsSession::Connect(const NatsConfig& config,
                                                                  const std::string& name,
                                                                  jsOptions* js_options) {
  natsOptions* opts = nullptr;
  natsStatus s = natsOptions_Create(&opts);
  std::vector<const char*> servers;
  for (const std::string& url : config.servers) servers.push_back(url.c_str());
  if (s == NATS_OK)
    s = natsOptions_SetServers(opts, servers.data(), static_cast<int>(servers.size()));
  if (s == NATS_OK) s = natsOptions_SetName(opts, name.c_str());
  if (s == NATS_OK) s = natsOptions_SetTimeout(opts, 2000);
  if (s == NATS_OK) s = natsOptions_SetMaxReconnect(opts, -1);  // forever
  if (s == NATS_OK) s = natsOptions_SetReconnectWait(opts, 250);
  natsConnection* conn = nullptr;
  if (s == NATS_OK) s = natsConnection_Connect(&conn, opts);
  natsOptions_Destroy(opts);
  if (s != NATS_OK) {
    return ToStatus(
        s, absl::StrCat("cannot connect to NATS at ", config.servers.front(),
                        config.servers.size() > 1 ? " (and the other [nats] servers)" : ""));
  }
  // JetStream API calls (lease reads and writes, consumer creation) wait at
  // most 2 s for the broker instead of the client's 5 s, so a lease round and
  // a shutdown with the broker gone end in bounded time.
  jsOptions defaults;
  if (js_options == nullptr) {
    jsOptions_Init(&defaults);
    js_options = &defaults;
  }
  if (js_options->Wait == 0) js_options->Wait = 2000;
  jsCtx* js = nullptr;
  s = natsConnection_JetStream(&js, conn, js_options);
  if (s != NATS_OK) {
    natsConnection_Destroy(conn);
    return ToStatus(s, "cannot create a JetStream context");
  }
  return std::unique_ptr<NatsSession>(new NatsSession(conn, js));
}

NatsSession::~NatsSession() {
  jsCtx_Destroy(js_);
  natsConnection_Close(conn_);
  natsConnection_Destroy(conn_);
}

absl::Status EnsureTickStream(NatsSession* session, const NatsConfig& config) {
  const std::string subject = config.partition_subject + ".>";
  for (int attempt = 0; attempt < 2; ++attempt) {
    jsStreamInfo* si = nullptr;
    jsErrCode jerr = static_cast<jsErrCode>(0);
    natsStatus s = RetryOnTimeout([&] {
      return js_GetStreamInfo(&si, session->js(), config.stream.c_str(), nullptr, &jerr);
    });
    if (s == NATS_OK) {
      bool has = false;
      for (int i = 0; i < si->Config->SubjectsLen; ++i) {
        has = has || subject == si->Config->Subjects[i];
      }
      jsStreamInfo_Destroy(si);
      if (!has) {
        return absl::FailedPreconditionError(absl::StrCat("JetStream stream '", config.stream,
                                                          "' exists but does not capture '",
                                                          subject, "' ([nats] partition_subject)"));
      }
      return absl::OkStatus();
    }
    if (s != NATS_NOT_FOUND) {
      return ToStatus(s, absl::StrCat("cannot look up stream '", config.stream, "'"), jerr);
    }
    jsStreamConfig sc;
    jsStreamConfig_Init(&sc);
    sc.Name = config.stream.c_str();
    const char* subjects[] = {subject.c_str()};
    sc.Subjects = subjects;
    sc.SubjectsLen = 1;
    sc.Storage = js_FileStorage;
    sc.Replicas = config.replicas;
    // How long the stream remembers a message id (Nats-Msg-Id): a publisher
    // resending a tick whose acknowledgement was lost relies on it to drop
    // the copy (jetstream_publisher.h).
    sc.Duplicates = static_cast<int64_t>(config.duplicate_window_seconds * 1e9);
    s = RetryOnTimeout([&] { return js_AddStream(&si, session->js(), &sc, nullptr, &jerr); });
    if (s == NATS_OK) {
      jsStreamInfo_Destroy(si);
      return absl::OkStatus();
    }
    if (jerr != JSStreamNameExistErr) {  // else: created concurrently; look again
      return ToStatus(s, absl::StrCat("cannot create stream '", config.stream, "'"), jerr);
    }
  }
  return absl::UnavailableError(absl::StrCat("stream '", config.stream, "' keeps changing"));
}

absl::StatusOr<int64_t> TickStreamDuplicateWindow(NatsSession* session, const NatsConfig& config) {
  jsStreamInfo* si = nullptr;
  jsErrCode jerr = static_cast<jsErrCode>(0);
  const natsStatus s = RetryOnTimeout(
      [&] { return js_GetStreamInfo(&si, session->js(), config.stream.c_str(), nullptr, &jerr); });
  if (s != NATS_OK) {
    return ToStatus(s, absl::StrCat("cannot look up stream '", config.stream, "'"), jerr);
  }
  const int64_t window = si->Config->Duplicates;
  jsStreamInfo_Destroy(si);
  return window;
}

absl::StatusOr<KvStorePtr> OpenLeaseBucket(NatsSession* session, const NatsConfig& config,
                                           bool create) {
  kvStore* kv = nullptr;
  natsStatus s =
      RetryOnTimeout([&] { return js_KeyValue(&kv, session->js(), config.lease_bucket.c_str()); });
  if (s == NATS_OK) return KvStorePtr(kv);
  if (s != NATS_NOT_FOUND || !create) {
    return ToStatus(s, absl::StrCat("cannot open key-value bucket '", config.lease_bucket, "'"));
  }
  kvConfig kc;
  kvConfig_Init(&kc);
  kc.Bucket = config.lease_bucket.c_str();
  kc.History = 1;
  // The bucket's max age (ns): a key not written for this long disappears,
  // which is what makes a lease of a dead instance expire.
  kc.TTL = static_cast<int64_t>(config.lease_seconds * 1e9);
  kc.StorageType = js_FileStorage;
  kc.Replicas = config.replicas;
  s = RetryOnTimeout([&] { return js_CreateKeyValue(&kv, session->js(), &kc); });
  if (s != NATS_OK) {
    // Another engine may have created it at the same moment (the server then
    // answers "subjects overlap with an existing stream"): open that one.
    kv = nullptr;
    if (RetryOnTimeout([&] {
          return js_KeyValue(&kv, session->js(), config.lease_bucket.c_str());
        }) == NATS_OK) {
      return KvStorePtr(kv);
    }
    return ToStatus(s, absl::StrCat("cannot create key-value bucket '", config.lease_bucket, "'"));
  }
  return KvStorePtr(kv);
}

std::string TickSubject(const NatsConfig& config, absl::string_view symbol) {
  return absl::StrCat(config.subject, ".", EncodeSubjectToken(symbol));
}

std::string PartitionFilter(const NatsConfig& config, int partition) {
  return absl::StrCat(config.partition_subject, ".", partition, ".*");
}

}  // namespace aftershock::nats_internal
