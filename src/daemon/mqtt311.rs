//! The MQTT 3.1.1 packets the result link speaks, encoded and decoded by hand from the
//! OASIS Standard (MQTT Version 3.1.1, 29 October 2014; sections cited as §n beside the
//! code): CONNECT, CONNACK, PUBLISH, PUBACK, PINGREQ, PINGRESP, DISCONNECT.
//!
//! Pure: encoding appends to the caller's buffer (so a whole batch of packets goes into
//! one buffer and out in one write), decoding reads one packet from the front of a byte
//! slice and says how many bytes it took, or that more bytes are needed. No I/O, no
//! runtime, no clock; never panics on what a broker sends (a property test feeds it
//! byte soup). Other packet types (subscriptions, QoS 2) are refused as unsupported:
//! the result link never asks for them.

/// The protocol level of MQTT 3.1.1 (§3.1.2.2).
pub const PROTOCOL_LEVEL: u8 = 4;
/// The largest remaining length four varint bytes can carry (§2.2.3).
pub const MAX_REMAINING: usize = 268_435_455;

/// Quality of service of a PUBLISH or a will (§4.3).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum QoS {
    AtMostOnce = 0,
    AtLeastOnce = 1,
    ExactlyOnce = 2,
}

impl QoS {
    fn from_bits(b: u8) -> Option<Self> {
        match b {
            0 => Some(Self::AtMostOnce),
            1 => Some(Self::AtLeastOnce),
            2 => Some(Self::ExactlyOnce),
            _ => None,
        }
    }
}

/// The will of a CONNECT (§3.1.2.5 - §3.1.2.7, §3.1.3.2, §3.1.3.3).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Will {
    pub topic: String,
    pub message: Vec<u8>,
    pub qos: QoS,
    pub retain: bool,
}

/// A CONNECT packet (§3.1).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Connect {
    pub client_id: String,
    pub keep_alive_s: u16,
    pub clean_session: bool,
    pub will: Option<Will>,
    pub username: Option<String>,
    pub password: Option<Vec<u8>>,
}

/// The CONNACK return code (§3.2.2.3, table 3.1).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ConnectReturn {
    Accepted = 0,
    UnacceptableProtocolVersion = 1,
    IdentifierRejected = 2,
    ServerUnavailable = 3,
    BadUserNameOrPassword = 4,
    NotAuthorized = 5,
}

/// A CONNACK packet (§3.2).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct ConnAck {
    pub session_present: bool,
    pub code: ConnectReturn,
}

/// A PUBLISH packet (§3.3); `pkid` is 0 for QoS 0 (which carries none).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Publish {
    pub dup: bool,
    pub qos: QoS,
    pub retain: bool,
    pub topic: String,
    pub pkid: u16,
    pub payload: Vec<u8>,
}

/// The packets of this module.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum Packet {
    Connect(Connect),
    ConnAck(ConnAck),
    Publish(Publish),
    PubAck(u16),
    PingReq,
    PingResp,
    Disconnect,
}

/// A packet that cannot be encoded as asked.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub enum EncodeError {
    #[error("{what} is {len} bytes, more than MQTT's 65535 for a string")]
    StringTooLong { what: &'static str, len: usize },
    #[error("packet of {len} bytes is over MQTT's limit of 268435455")]
    TooLarge { len: usize },
    #[error("a QoS 1 or 2 PUBLISH needs a packet id from 1 to 65535")]
    ZeroPacketId,
    #[error("a password needs a user name in MQTT 3.1.1")]
    PasswordWithoutUser,
}

/// What the broker sent that is not MQTT 3.1.1 as this link speaks it.
#[derive(Debug, Clone, PartialEq, Eq, thiserror::Error)]
pub enum DecodeError {
    #[error("remaining length runs over four bytes")]
    MalformedLength,
    #[error("packet of {len} bytes is over the limit of {limit}")]
    TooLarge { len: usize, limit: usize },
    #[error("packet type {0} is not one this link handles")]
    Unsupported(u8),
    #[error("packet type {kind} with reserved flags {flags:#06b}")]
    BadFlags { kind: u8, flags: u8 },
    #[error("packet type {kind}: {what}")]
    Malformed { kind: u8, what: &'static str },
}

// Packet types (§2.2.1, table 2.1).
const CONNECT: u8 = 1;
const CONNACK: u8 = 2;
const PUBLISH: u8 = 3;
const PUBACK: u8 = 4;
const PINGREQ: u8 = 12;
const PINGRESP: u8 = 13;
const DISCONNECT: u8 = 14;

/// Appends the remaining length as MQTT's variable-length integer (§2.2.3).
fn put_remaining(buf: &mut Vec<u8>, mut len: usize) {
    loop {
        let mut byte = (len % 128) as u8;
        len /= 128;
        if len > 0 {
            byte |= 0x80;
        }
        buf.push(byte);
        if len == 0 {
            break;
        }
    }
}

/// Appends a UTF-8 string with its two-byte length (§1.5.3).
fn put_str(buf: &mut Vec<u8>, s: &[u8]) {
    buf.extend_from_slice(&(s.len() as u16).to_be_bytes());
    buf.extend_from_slice(s);
}

fn check_str(what: &'static str, s: &[u8]) -> Result<(), EncodeError> {
    if s.len() > usize::from(u16::MAX) {
        return Err(EncodeError::StringTooLong { what, len: s.len() });
    }
    Ok(())
}

/// Appends a CONNECT (§3.1).
pub fn encode_connect(buf: &mut Vec<u8>, c: &Connect) -> Result<(), EncodeError> {
    check_str("the client id", c.client_id.as_bytes())?;
    if c.password.is_some() && c.username.is_none() {
        // §3.1.2.9: the password flag must be 0 when the user name flag is 0.
        return Err(EncodeError::PasswordWithoutUser);
    }
    // Variable header: protocol name, level, flags, keep alive (§3.1.2): 10 bytes.
    let mut len = 10 + 2 + c.client_id.len();
    if let Some(w) = &c.will {
        check_str("the will topic", w.topic.as_bytes())?;
        check_str("the will message", &w.message)?;
        len += 2 + w.topic.len() + 2 + w.message.len();
    }
    if let Some(u) = &c.username {
        check_str("the user name", u.as_bytes())?;
        len += 2 + u.len();
    }
    if let Some(p) = &c.password {
        check_str("the password", p)?;
        len += 2 + p.len();
    }
    let mut flags = 0u8;
    if c.clean_session {
        flags |= 0x02; // §3.1.2.4
    }
    if let Some(w) = &c.will {
        flags |= 0x04 | ((w.qos as u8) << 3); // §3.1.2.5, §3.1.2.6
        if w.retain {
            flags |= 0x20; // §3.1.2.7
        }
    }
    if c.password.is_some() {
        flags |= 0x40; // §3.1.2.9
    }
    if c.username.is_some() {
        flags |= 0x80; // §3.1.2.8
    }
    buf.push(CONNECT << 4);
    put_remaining(buf, len);
    put_str(buf, b"MQTT"); // §3.1.2.1
    buf.push(PROTOCOL_LEVEL);
    buf.push(flags);
    buf.extend_from_slice(&c.keep_alive_s.to_be_bytes()); // §3.1.2.10
    // Payload order: client id, will topic, will message, user name, password (§3.1.3).
    put_str(buf, c.client_id.as_bytes());
    if let Some(w) = &c.will {
        put_str(buf, w.topic.as_bytes());
        put_str(buf, &w.message);
    }
    if let Some(u) = &c.username {
        put_str(buf, u.as_bytes());
    }
    if let Some(p) = &c.password {
        put_str(buf, p);
    }
    Ok(())
}

/// Appends a PUBLISH (§3.3) from borrowed parts: the result link encodes every record
/// of a batch this way into one buffer. `pkid` is ignored for QoS 0.
pub fn encode_publish(
    buf: &mut Vec<u8>,
    topic: &str,
    payload: &[u8],
    qos: QoS,
    retain: bool,
    dup: bool,
    pkid: u16,
) -> Result<(), EncodeError> {
    encode_publish_parts(buf, topic, &[payload], qos, retain, dup, pkid)
}

/// [`encode_publish`] with the payload given in pieces, written one after the other (a
/// writer that adds a head to a payload need not join them first).
pub fn encode_publish_parts(
    buf: &mut Vec<u8>,
    topic: &str,
    payload: &[&[u8]],
    qos: QoS,
    retain: bool,
    dup: bool,
    pkid: u16,
) -> Result<(), EncodeError> {
    check_str("the topic", topic.as_bytes())?;
    let with_id = qos != QoS::AtMostOnce;
    if with_id && pkid == 0 {
        return Err(EncodeError::ZeroPacketId); // §2.3.1
    }
    let payload_len: usize = payload.iter().map(|p| p.len()).sum();
    let len = 2 + topic.len() + if with_id { 2 } else { 0 } + payload_len;
    if len > MAX_REMAINING {
        return Err(EncodeError::TooLarge { len });
    }
    // Fixed header flags: DUP bit 3, QoS bits 2-1, RETAIN bit 0 (§3.3.1).
    let mut first = PUBLISH << 4 | ((qos as u8) << 1);
    if dup {
        first |= 0x08;
    }
    if retain {
        first |= 0x01;
    }
    buf.push(first);
    put_remaining(buf, len);
    put_str(buf, topic.as_bytes());
    if with_id {
        buf.extend_from_slice(&pkid.to_be_bytes());
    }
    for part in payload {
        buf.extend_from_slice(part);
    }
    Ok(())
}

/// Sets the DUP flag of an encoded PUBLISH in place (its first byte, §3.3.1.1): the
/// resend of an unacknowledged packet on a resumed session.
pub fn set_dup(encoded_publish: &mut [u8]) {
    if let Some(first) = encoded_publish.first_mut()
        && *first >> 4 == PUBLISH
    {
        *first |= 0x08;
    }
}

/// Appends any packet of this module.
pub fn encode(buf: &mut Vec<u8>, p: &Packet) -> Result<(), EncodeError> {
    match p {
        Packet::Connect(c) => encode_connect(buf, c)?,
        Packet::ConnAck(a) => {
            // §3.2: fixed 0x20, remaining length 2, acknowledge flags, return code.
            buf.extend_from_slice(&[CONNACK << 4, 2, u8::from(a.session_present), a.code as u8]);
        }
        Packet::Publish(p) => {
            encode_publish(buf, &p.topic, &p.payload, p.qos, p.retain, p.dup, p.pkid)?
        }
        Packet::PubAck(id) => {
            // §3.4: fixed 0x40, remaining length 2, packet id.
            buf.extend_from_slice(&[PUBACK << 4, 2]);
            buf.extend_from_slice(&id.to_be_bytes());
        }
        // §3.12, §3.13, §3.14: two bytes each, remaining length 0.
        Packet::PingReq => buf.extend_from_slice(&[PINGREQ << 4, 0]),
        Packet::PingResp => buf.extend_from_slice(&[PINGRESP << 4, 0]),
        Packet::Disconnect => buf.extend_from_slice(&[DISCONNECT << 4, 0]),
    }
    Ok(())
}

/// A cursor over one packet's remaining bytes.
struct Reader<'a> {
    bytes: &'a [u8],
    kind: u8,
}

impl<'a> Reader<'a> {
    fn short(&self) -> DecodeError {
        DecodeError::Malformed {
            kind: self.kind,
            what: "shorter than its fields",
        }
    }

    fn take(&mut self, n: usize) -> Result<&'a [u8], DecodeError> {
        if self.bytes.len() < n {
            return Err(self.short());
        }
        let (head, rest) = self.bytes.split_at(n);
        self.bytes = rest;
        Ok(head)
    }

    fn u8(&mut self) -> Result<u8, DecodeError> {
        Ok(self.take(1)?[0])
    }

    fn u16(&mut self) -> Result<u16, DecodeError> {
        let b = self.take(2)?;
        Ok(u16::from_be_bytes([b[0], b[1]]))
    }

    fn bytes(&mut self) -> Result<&'a [u8], DecodeError> {
        let n = self.u16()?;
        self.take(usize::from(n))
    }

    /// A UTF-8 string (§1.5.3): well-formed, and no U+0000 (§1.5.3, [MQTT-1.5.3-2]).
    fn string(&mut self) -> Result<String, DecodeError> {
        let kind = self.kind;
        let b = self.bytes()?;
        let s = std::str::from_utf8(b).map_err(|_| DecodeError::Malformed {
            kind,
            what: "a string that is not UTF-8",
        })?;
        if s.contains('\0') {
            return Err(DecodeError::Malformed {
                kind,
                what: "a string with U+0000",
            });
        }
        Ok(s.to_string())
    }

    fn end(&self) -> Result<(), DecodeError> {
        if self.bytes.is_empty() {
            Ok(())
        } else {
            Err(DecodeError::Malformed {
                kind: self.kind,
                what: "bytes beyond its fields",
            })
        }
    }
}

/// Reads the remaining length after the first byte (§2.2.3): `Ok(None)` when more
/// bytes are needed, else the length and the bytes its encoding took.
fn remaining(buf: &[u8]) -> Result<Option<(usize, usize)>, DecodeError> {
    let mut len = 0usize;
    for i in 0..4 {
        let Some(&b) = buf.get(i) else {
            return Ok(None);
        };
        len |= usize::from(b & 0x7f) << (7 * i);
        if b & 0x80 == 0 {
            return Ok(Some((len, i + 1)));
        }
    }
    Err(DecodeError::MalformedLength)
}

/// Reads one packet from the front of `buf`: `Ok(None)` when `buf` does not yet hold a
/// whole packet, else the packet and the bytes it took. A packet whose remaining length
/// passes `max_remaining` is refused before its bytes arrive.
pub fn decode(buf: &[u8], max_remaining: usize) -> Result<Option<(Packet, usize)>, DecodeError> {
    let Some(&first) = buf.first() else {
        return Ok(None);
    };
    let Some((len, len_bytes)) = remaining(&buf[1..])? else {
        return Ok(None);
    };
    if len > max_remaining {
        return Err(DecodeError::TooLarge {
            len,
            limit: max_remaining,
        });
    }
    let total = 1 + len_bytes + len;
    if buf.len() < total {
        return Ok(None);
    }
    let (kind, flags) = (first >> 4, first & 0x0f);
    let mut r = Reader {
        bytes: &buf[1 + len_bytes..total],
        kind,
    };
    // Reserved flags of every type but PUBLISH are fixed (§2.2.2, table 2.2).
    let fixed_flags = |want: u8| {
        if flags == want {
            Ok(())
        } else {
            Err(DecodeError::BadFlags { kind, flags })
        }
    };
    let packet = match kind {
        CONNECT => {
            fixed_flags(0)?;
            Packet::Connect(decode_connect(&mut r)?)
        }
        CONNACK => {
            fixed_flags(0)?;
            let ack_flags = r.u8()?;
            if ack_flags & 0xfe != 0 {
                // §3.2.2.1: bits 7-1 reserved, set to 0.
                return Err(DecodeError::Malformed {
                    kind,
                    what: "reserved acknowledge flags set",
                });
            }
            let code = match r.u8()? {
                0 => ConnectReturn::Accepted,
                1 => ConnectReturn::UnacceptableProtocolVersion,
                2 => ConnectReturn::IdentifierRejected,
                3 => ConnectReturn::ServerUnavailable,
                4 => ConnectReturn::BadUserNameOrPassword,
                5 => ConnectReturn::NotAuthorized,
                _ => {
                    return Err(DecodeError::Malformed {
                        kind,
                        what: "a return code above 5",
                    });
                }
            };
            r.end()?;
            Packet::ConnAck(ConnAck {
                session_present: ack_flags == 1,
                code,
            })
        }
        PUBLISH => {
            let qos =
                QoS::from_bits((flags >> 1) & 0x03).ok_or(DecodeError::BadFlags { kind, flags })?; // §3.3.1.2: QoS 3 is malformed
            let dup = flags & 0x08 != 0;
            if qos == QoS::AtMostOnce && dup {
                // §3.3.1.1: DUP must be 0 for QoS 0.
                return Err(DecodeError::BadFlags { kind, flags });
            }
            let topic = r.string()?;
            if topic.contains(['+', '#']) {
                // §3.3.2.1: no wildcards in a PUBLISH topic.
                return Err(DecodeError::Malformed {
                    kind,
                    what: "a wildcard in the topic",
                });
            }
            let pkid = if qos == QoS::AtMostOnce { 0 } else { r.u16()? };
            if qos != QoS::AtMostOnce && pkid == 0 {
                return Err(DecodeError::Malformed {
                    kind,
                    what: "packet id 0",
                }); // §2.3.1
            }
            Packet::Publish(Publish {
                dup,
                qos,
                retain: flags & 0x01 != 0,
                topic,
                pkid,
                payload: r.bytes.to_vec(),
            })
        }
        PUBACK => {
            fixed_flags(0)?;
            let id = r.u16()?;
            r.end()?;
            Packet::PubAck(id)
        }
        PINGREQ | PINGRESP | DISCONNECT => {
            fixed_flags(0)?;
            r.end()?;
            match kind {
                PINGREQ => Packet::PingReq,
                PINGRESP => Packet::PingResp,
                _ => Packet::Disconnect,
            }
        }
        other => return Err(DecodeError::Unsupported(other)),
    };
    Ok(Some((packet, total)))
}

fn decode_connect(r: &mut Reader<'_>) -> Result<Connect, DecodeError> {
    let kind = r.kind;
    let bad = |what| DecodeError::Malformed { kind, what };
    if r.bytes()? != b"MQTT" {
        return Err(bad("protocol name is not MQTT")); // §3.1.2.1
    }
    if r.u8()? != PROTOCOL_LEVEL {
        return Err(bad("protocol level is not 4")); // §3.1.2.2
    }
    let flags = r.u8()?;
    if flags & 0x01 != 0 {
        return Err(bad("reserved connect flag set")); // §3.1.2.3
    }
    let keep_alive_s = r.u16()?;
    let client_id = r.string()?;
    let will_flag = flags & 0x04 != 0;
    let will_qos = (flags >> 3) & 0x03;
    let will_retain = flags & 0x20 != 0;
    if !will_flag && (will_qos != 0 || will_retain) {
        return Err(bad("will QoS or retain without a will")); // §3.1.2.6, §3.1.2.7
    }
    let will = if will_flag {
        let qos = QoS::from_bits(will_qos).ok_or(bad("will QoS 3"))?;
        let topic = r.string()?;
        let message = r.bytes()?.to_vec();
        Some(Will {
            topic,
            message,
            qos,
            retain: will_retain,
        })
    } else {
        None
    };
    let username = if flags & 0x80 != 0 {
        Some(r.string()?)
    } else {
        None
    };
    let password = if flags & 0x40 != 0 {
        if username.is_none() {
            return Err(bad("a password without a user name")); // §3.1.2.9
        }
        Some(r.bytes()?.to_vec())
    } else {
        None
    };
    r.end()?;
    Ok(Connect {
        client_id,
        keep_alive_s,
        clean_session: flags & 0x02 != 0,
        will,
        username,
        password,
    })
}

#[cfg(test)]
mod tests {
    use super::*;
    use proptest::prelude::*;

    fn enc(p: &Packet) -> Vec<u8> {
        let mut b = Vec::new();
        encode(&mut b, p).unwrap();
        b
    }

    fn dec(b: &[u8]) -> Packet {
        let (p, n) = decode(b, MAX_REMAINING).unwrap().unwrap();
        assert_eq!(n, b.len(), "whole packet taken");
        p
    }

    #[test]
    fn remaining_length_varint_at_each_size_boundary() {
        // §2.2.3 table 2.4: 0, 127 in one byte; 128, 16383 in two; 16384 in three;
        // 2097152 and 268435455 in four.
        let cases: [(usize, &[u8]); 7] = [
            (0, &[0x00]),
            (127, &[0x7f]),
            (128, &[0x80, 0x01]),
            (16_383, &[0xff, 0x7f]),
            (16_384, &[0x80, 0x80, 0x01]),
            (2_097_152, &[0x80, 0x80, 0x80, 0x01]),
            (268_435_455, &[0xff, 0xff, 0xff, 0x7f]),
        ];
        for (len, bytes) in cases {
            let mut b = Vec::new();
            put_remaining(&mut b, len);
            assert_eq!(b, bytes, "{len}");
            assert_eq!(remaining(bytes), Ok(Some((len, bytes.len()))));
        }
        // §2.2.3: at most four bytes; a fifth continuation is malformed.
        assert_eq!(
            remaining(&[0xff, 0xff, 0xff, 0xff, 0x01]),
            Err(DecodeError::MalformedLength)
        );
        assert_eq!(remaining(&[0x80]), Ok(None), "needs more bytes");
    }

    #[test]
    fn connect_bytes_follow_the_spec_example() {
        // §3.1.2.1 - §3.1.2.10: 0x10, remaining length, 00 04 'M' 'Q' 'T' 'T', level 4,
        // flags, keep alive MSB LSB; §3.1.3 payload order. Flags here: user name 0x80,
        // password 0x40, will retain 0x20, will QoS 1 0x08, will 0x04, clean session
        // 0x02 = 0xEE. Keep alive 10 s = 00 0A (the §3.1.2.10 figure 3.5 example).
        let c = Connect {
            client_id: "ab".into(),
            keep_alive_s: 10,
            clean_session: true,
            will: Some(Will {
                topic: "s".into(),
                message: b"off".to_vec(),
                qos: QoS::AtLeastOnce,
                retain: true,
            }),
            username: Some("u".into()),
            password: Some(b"pw".to_vec()),
        };
        let got = enc(&Packet::Connect(c.clone()));
        // §2.2.1: CONNECT is type 1, flags 0. §2.2.3: remaining length = variable
        // header 10 + client id 2+2 + will topic 2+1 + will message 2+3 + user 2+1 +
        // password 2+2 = 29, one byte.
        assert_eq!(got[..2], [0x10, 29]);
        assert_eq!(
            &got[2..],
            &[
                0x00, 0x04, b'M', b'Q', b'T', b'T', 0x04, 0xEE, 0x00, 0x0A, // variable header
                0x00, 0x02, b'a', b'b', // client id
                0x00, 0x01, b's', // will topic
                0x00, 0x03, b'o', b'f', b'f', // will message
                0x00, 0x01, b'u', // user name
                0x00, 0x02, b'p', b'w', // password
            ]
        );
        assert_eq!(dec(&got), Packet::Connect(c));
    }

    #[test]
    fn connect_without_will_or_login_keeps_session() {
        // §3.1.2.4: clean session 0 means resume; flags byte 0x00. Keep alive 60 = 00 3C.
        let c = Connect {
            client_id: "x".into(),
            keep_alive_s: 60,
            clean_session: false,
            will: None,
            username: None,
            password: None,
        };
        assert_eq!(
            enc(&Packet::Connect(c.clone())),
            [
                0x10, 13, 0x00, 0x04, b'M', b'Q', b'T', b'T', 0x04, 0x00, 0x00, 0x3C, 0x00, 0x01,
                b'x'
            ]
        );
        // §3.1.2.9: a password without a user name is not allowed.
        let mut bad = c;
        bad.password = Some(b"p".to_vec());
        assert_eq!(
            encode_connect(&mut Vec::new(), &bad),
            Err(EncodeError::PasswordWithoutUser)
        );
    }

    #[test]
    fn connect_refuses_reserved_flag_and_other_protocol() {
        // §3.1.2.3: reserved flag bit 0 must be 0.
        let b = [
            0x10, 13, 0x00, 0x04, b'M', b'Q', b'T', b'T', 0x04, 0x01, 0x00, 0x3C, 0x00, 0x01, b'x',
        ];
        assert!(matches!(
            decode(&b, MAX_REMAINING),
            Err(DecodeError::Malformed { kind: 1, .. })
        ));
        // §3.1.2.2: level 3 (MQTT 3.1) is not this protocol.
        let mut b3 = b;
        b3[8] = 3;
        b3[9] = 0;
        assert!(decode(&b3, MAX_REMAINING).is_err());
    }

    #[test]
    fn connack_codes_and_session_present() {
        // §3.2: 0x20 0x02, acknowledge flags (bit 0 session present), return code.
        assert_eq!(
            dec(&[0x20, 0x02, 0x01, 0x00]),
            Packet::ConnAck(ConnAck {
                session_present: true,
                code: ConnectReturn::Accepted
            })
        );
        // §3.2.2.3 table 3.1: 4 = bad user name or password, 5 = not authorized.
        assert_eq!(
            dec(&[0x20, 0x02, 0x00, 0x04]),
            Packet::ConnAck(ConnAck {
                session_present: false,
                code: ConnectReturn::BadUserNameOrPassword
            })
        );
        assert_eq!(
            dec(&[0x20, 0x02, 0x00, 0x05]),
            Packet::ConnAck(ConnAck {
                session_present: false,
                code: ConnectReturn::NotAuthorized
            })
        );
        // §3.2.2.3: 6-255 reserved; §3.2.2.1: flag bits 7-1 reserved.
        assert!(decode(&[0x20, 0x02, 0x00, 0x06], MAX_REMAINING).is_err());
        assert!(decode(&[0x20, 0x02, 0x02, 0x00], MAX_REMAINING).is_err());
        // §2.2.2: CONNACK's fixed-header flags are 0.
        assert_eq!(
            decode(&[0x21, 0x02, 0x00, 0x00], MAX_REMAINING),
            Err(DecodeError::BadFlags { kind: 2, flags: 1 })
        );
    }

    #[test]
    fn publish_qos1_bytes_and_dup() {
        // §3.3.1: 0x30 | DUP 0x08 | QoS 1 0x02 | RETAIN 0x01; §3.3.2: topic, packet id
        // (the §3.3.2.3 table 3.3 example: topic "a/b", packet id 10); payload.
        let mut b = Vec::new();
        encode_publish(&mut b, "a/b", b"hi", QoS::AtLeastOnce, true, false, 10).unwrap();
        assert_eq!(
            b,
            [
                0x33, 9, 0x00, 0x03, b'a', b'/', b'b', 0x00, 0x0A, b'h', b'i'
            ]
        );
        set_dup(&mut b);
        assert_eq!(b[0], 0x3B, "§3.3.1.1 DUP is bit 3");
        assert_eq!(
            dec(&b),
            Packet::Publish(Publish {
                dup: true,
                qos: QoS::AtLeastOnce,
                retain: true,
                topic: "a/b".into(),
                pkid: 10,
                payload: b"hi".to_vec()
            })
        );
        // §2.3.1: a QoS 1 PUBLISH needs a non-zero packet id.
        assert_eq!(
            encode_publish(&mut Vec::new(), "a", b"", QoS::AtLeastOnce, false, false, 0),
            Err(EncodeError::ZeroPacketId)
        );
        assert!(decode(&[0x32, 5, 0, 1, b'a', 0, 0], MAX_REMAINING).is_err());
        // §3.3.1.2: QoS 3 is malformed; §3.3.1.1: DUP with QoS 0 is malformed.
        assert!(decode(&[0x36, 5, 0, 1, b'a', 0, 1], MAX_REMAINING).is_err());
        assert!(decode(&[0x38, 3, 0, 1, b'a'], MAX_REMAINING).is_err());
        // §3.3.2.1: no wildcards in a PUBLISH topic.
        assert!(decode(&[0x30, 3, 0, 1, b'#'], MAX_REMAINING).is_err());
        // QoS 0 carries no packet id (§3.3.2.2).
        assert_eq!(
            dec(&[0x30, 4, 0, 1, b'a', b'z']),
            Packet::Publish(Publish {
                dup: false,
                qos: QoS::AtMostOnce,
                retain: false,
                topic: "a".into(),
                pkid: 0,
                payload: b"z".to_vec()
            })
        );
    }

    #[test]
    fn puback_ping_and_disconnect_bytes() {
        // §3.4: 0x40 0x02 id; §3.12: 0xC0 0x00; §3.13: 0xD0 0x00; §3.14: 0xE0 0x00.
        assert_eq!(enc(&Packet::PubAck(0x1234)), [0x40, 0x02, 0x12, 0x34]);
        assert_eq!(dec(&[0x40, 0x02, 0x12, 0x34]), Packet::PubAck(0x1234));
        assert_eq!(enc(&Packet::PingReq), [0xC0, 0x00]);
        assert_eq!(dec(&[0xD0, 0x00]), Packet::PingResp);
        assert_eq!(enc(&Packet::Disconnect), [0xE0, 0x00]);
        // §2.2.2: reserved flags of these are 0; PUBACK has exactly 2 bytes (§3.4.1).
        assert!(decode(&[0xD1, 0x00], MAX_REMAINING).is_err());
        assert!(decode(&[0x40, 0x03, 0, 1, 9], MAX_REMAINING).is_err());
        // §2.2.1: SUBACK (9) is a real type, but not one this link handles.
        assert_eq!(
            decode(&[0x90, 0x03, 0, 1, 0], MAX_REMAINING),
            Err(DecodeError::Unsupported(9))
        );
    }

    #[test]
    fn partial_packets_need_more_bytes_and_limits_hold() {
        let mut b = Vec::new();
        encode_publish(&mut b, "a/b", b"hello", QoS::AtLeastOnce, false, false, 1).unwrap();
        for cut in 0..b.len() {
            assert_eq!(decode(&b[..cut], MAX_REMAINING), Ok(None), "cut at {cut}");
        }
        // Two packets in one buffer: the first is read and its length returned.
        let mut two = b.clone();
        two.extend_from_slice(&[0xD0, 0x00]);
        assert_eq!(decode(&two, MAX_REMAINING).unwrap().unwrap().1, b.len());
        // Over the caller's limit: refused from the header alone (common practice).
        assert_eq!(
            decode(&[0x30, 0x80, 0x01], 100),
            Err(DecodeError::TooLarge {
                len: 128,
                limit: 100
            })
        );
    }

    fn text() -> impl Strategy<Value = String> {
        "[a-z0-9/é_-]{0,20}"
    }

    fn qos() -> impl Strategy<Value = QoS> {
        prop_oneof![
            Just(QoS::AtMostOnce),
            Just(QoS::AtLeastOnce),
            Just(QoS::ExactlyOnce)
        ]
    }

    fn packet() -> impl Strategy<Value = Packet> {
        let will = (
            text(),
            proptest::collection::vec(any::<u8>(), 0..40),
            qos(),
            any::<bool>(),
        )
            .prop_map(|(topic, message, qos, retain)| Will {
                topic,
                message,
                qos,
                retain,
            });
        let login = proptest::option::of((
            text(),
            proptest::option::of(proptest::collection::vec(any::<u8>(), 0..20)),
        ));
        let connect = (
            text(),
            any::<u16>(),
            any::<bool>(),
            proptest::option::of(will),
            login,
        )
            .prop_map(|(client_id, keep_alive_s, clean_session, will, login)| {
                let (username, password) = match login {
                    Some((u, p)) => (Some(u), p),
                    None => (None, None),
                };
                Packet::Connect(Connect {
                    client_id,
                    keep_alive_s,
                    clean_session,
                    will,
                    username,
                    password,
                })
            });
        let codes = prop_oneof![
            Just(ConnectReturn::Accepted),
            Just(ConnectReturn::UnacceptableProtocolVersion),
            Just(ConnectReturn::IdentifierRejected),
            Just(ConnectReturn::ServerUnavailable),
            Just(ConnectReturn::BadUserNameOrPassword),
            Just(ConnectReturn::NotAuthorized),
        ];
        let connack = (any::<bool>(), codes).prop_map(|(session_present, code)| {
            Packet::ConnAck(ConnAck {
                session_present,
                code,
            })
        });
        let publish = (
            any::<bool>(),
            qos(),
            any::<bool>(),
            text(),
            1..=u16::MAX,
            proptest::collection::vec(any::<u8>(), 0..300),
        )
            .prop_map(|(dup, qos, retain, topic, pkid, payload)| {
                let zero = qos == QoS::AtMostOnce;
                Packet::Publish(Publish {
                    dup: dup && !zero,
                    qos,
                    retain,
                    topic,
                    pkid: if zero { 0 } else { pkid },
                    payload,
                })
            });
        prop_oneof![
            connect,
            connack,
            publish,
            any::<u16>().prop_map(Packet::PubAck),
            Just(Packet::PingReq),
            Just(Packet::PingResp),
            Just(Packet::Disconnect),
        ]
    }

    proptest! {
        #[test]
        fn decode_of_encode_is_identity(p in packet(), tail in proptest::collection::vec(any::<u8>(), 0..8)) {
            let mut b = Vec::new();
            encode(&mut b, &p).unwrap();
            let n = b.len();
            b.extend_from_slice(&tail);
            let (back, used) = decode(&b, MAX_REMAINING).unwrap().unwrap();
            prop_assert_eq!(back, p);
            prop_assert_eq!(used, n);
        }

        #[test]
        fn byte_soup_never_panics(b in proptest::collection::vec(any::<u8>(), 0..64)) {
            // Every outcome is fine but a panic; a packet taken never claims more bytes
            // than there are.
            if let Ok(Some((_, used))) = decode(&b, 1 << 20) {
                prop_assert!(used <= b.len());
            }
        }
    }
}
