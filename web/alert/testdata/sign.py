# Signatures of the Standard Webhooks scheme computed with Python's hmac,
# hashlib and base64 (standard library), for message_test.go:
#   HMAC-SHA256(key, "<id>.<timestamp>.<body>"), base64, prefixed "v1,".
# A secret starting "whsec_" is keyed with the base64-decoded rest; any
# other secret with its UTF-8 bytes as given.
import base64, hashlib, hmac

def sign(secret, msg_id, ts, body):
    key = base64.b64decode(secret[6:]) if secret.startswith("whsec_") else secret.encode("utf-8")
    mac = hmac.new(key, f"{msg_id}.{ts}.".encode() + body.encode("utf-8"), hashlib.sha256)
    return "v1," + base64.b64encode(mac.digest()).decode()

print(sign("plant secret ✓ not base64", "msg_lot7_rule2_signal", 1764662400, '{"type":"lot.signal"}'))
print(sign("c2VjcmV0", "msg_lot7_rule2_signal", 1764662400, '{"type":"lot.signal"}'))
