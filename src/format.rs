//! The codebook file and the index-stream file: their byte layout, writing
//! and strict reading.
//!
//! Owns turning a [`Codebook`] or a list of indices into bytes and back,
//! including every check a reader makes before trusting a file. Never trains,
//! encodes or interprets what the codewords mean. The layout is specified in
//! `docs/file-formats.md`; in short, both files are
//!
//! | bytes | content |
//! |---|---|
//! | 8 | magic tag: `VQFORGEB` (codebook) or `VQFORGES` (stream) |
//! | 2 | format version, `u16` little-endian (this build: 1) |
//! | 4 | header length H, `u32` little-endian |
//! | H | header, a postcard-serialised struct |
//! | … | payload: `f32` LE codewords, or bit-packed indices ([`crate::pack`]) |
//! | 4 | CRC-32 (IEEE) of every byte before it, `u32` little-endian |
//!
//! Readers check, in this order, so the message names the most basic fault:
//! the magic tag (is this our file, and which kind?), the version (can this
//! build read the rest?), that the fixed parts and the header fit in the
//! file, the checksum, the header itself, and finally that the header's
//! numbers agree with the payload and stay within the [`Limits`]. Sizes are
//! compared with checked arithmetic before anything is allocated, and the
//! file readers check the header against the file's length before reading
//! the payload, so a header claiming billions of codewords costs nothing.
//!
//! ```
//! use vqforge::codebook::{Codebook, Meaning, TrainingFacts};
//! use vqforge::format::{codebook_from_bytes, codebook_to_bytes};
//! use vqforge::kmeans::{Seeding, StopReason};
//!
//! let book = Codebook {
//!     dimension: 2,
//!     codewords: vec![0.0, 0.5, 1.0, 1.5],
//!     meaning: Meaning::Plain,
//!     training: TrainingFacts {
//!         seed: 1,
//!         restarts: 1,
//!         seeding: Seeding::KMeansPlusPlus,
//!         iterations: 4,
//!         stopped_by: StopReason::Converged,
//!         vectors: 10,
//!         distinct_vectors: 10,
//!         mse_scaled: 0.01,
//!     },
//! };
//! let mut bytes = codebook_to_bytes(&book).unwrap();
//! assert_eq!(&bytes[..8], b"VQFORGEB");
//! assert_eq!(codebook_from_bytes(&bytes).unwrap(), book);
//!
//! bytes[20] ^= 0x10;
//! let e = codebook_from_bytes(&bytes).unwrap_err();
//! assert_eq!(e.to_string(), "reading codebook: checksum mismatch: the file is corrupted");
//! ```

use std::path::Path;

use serde::{Deserialize, Serialize};

use crate::atomic::write_atomic;
use crate::codebook::{bits_for_size, Codebook, Meaning, TimeAxis, TrainingFacts};
use crate::error::{Error, ErrorKind, Result};
use crate::limits::{self, Limits};
use crate::pack::{packed_len, unpack_indices, BitPacker};

/// Magic tag opening every codebook file.
pub const CODEBOOK_MAGIC: [u8; 8] = *b"VQFORGEB";
/// Magic tag opening every index-stream file.
pub const STREAM_MAGIC: [u8; 8] = *b"VQFORGES";
/// The only format version this build writes and reads.
pub const FORMAT_VERSION: u16 = 1;

/// Magic, version and header length.
const PREFIX_LEN: usize = 8 + 2 + 4;
const CRC_LEN: usize = 4;
/// Bytes every file has whatever its header and payload: the prefix and the CRC.
pub const FIXED_LEN: usize = PREFIX_LEN + CRC_LEN;

/// Largest codebook a stream can index with 32-bit indices.
const MAX_STREAM_SIZE: u64 = 1 << 32;

/// Which of the two vqforge files some bytes are.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum FileKind {
    /// A codebook file (`VQFORGEB`).
    Codebook,
    /// An index-stream file (`VQFORGES`).
    Stream,
}

impl FileKind {
    /// The magic tag of this kind.
    pub fn magic(self) -> [u8; 8] {
        match self {
            FileKind::Codebook => CODEBOOK_MAGIC,
            FileKind::Stream => STREAM_MAGIC,
        }
    }

    fn noun(self) -> &'static str {
        match self {
            FileKind::Codebook => "codebook",
            FileKind::Stream => "stream",
        }
    }

    fn other(self) -> FileKind {
        match self {
            FileKind::Codebook => FileKind::Stream,
            FileKind::Stream => FileKind::Codebook,
        }
    }

    fn reading(self) -> &'static str {
        match self {
            FileKind::Codebook => "reading codebook",
            FileKind::Stream => "reading stream",
        }
    }
}

/// The kind of vqforge file `bytes` claims to be, from its magic tag alone
/// (nothing else is checked). `None` for anything else.
pub fn detect_kind(bytes: &[u8]) -> Option<FileKind> {
    [FileKind::Codebook, FileKind::Stream]
        .into_iter()
        .find(|kind| bytes.starts_with(&kind.magic()))
}

/// The codebook file's header. The field order is part of the format.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
struct BookHeader {
    dimension: u64,
    size: u64,
    meaning: Meaning,
    training: TrainingFacts,
}

/// Extra facts a stream of table records carries so decode can rebuild the table.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct RecordInfo {
    /// Table rows before framing. Padding rows added to complete a short last
    /// frame are not counted, so the stream holds ⌈rows / frame⌉ indices.
    pub rows: u64,
    /// The regularly spaced time column, if the table had one.
    pub time: Option<TimeAxis>,
}

/// Extra facts a stream of image pixels carries so decode can rebuild the image.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub struct ImageInfo {
    /// Width in pixels; the stream holds width × height indices, row by row.
    pub width: u32,
    /// Height in pixels.
    pub height: u32,
}

/// The index-stream file's header. The field order is part of the format.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct StreamHeader {
    /// Codewords k in the codebook the indices refer to.
    pub size: u64,
    /// Bits per packed index; always [`bits_for_size`]`(size)`.
    pub bits: u32,
    /// Number of indices (encoded vectors).
    pub vectors: u64,
    /// [`fingerprint`] of the codebook the stream was made with.
    pub codebook_fingerprint: u32,
    /// Components per vector of that codebook.
    pub dimension: u64,
    /// Present when the vectors are table records.
    pub records: Option<RecordInfo>,
    /// Present when the vectors are the pixels of an image.
    pub image: Option<ImageInfo>,
}

impl StreamHeader {
    /// The header of a stream of `vectors` indices into `codebook`, with the
    /// size, width, dimension and fingerprint filled in from it.
    pub fn for_codebook(
        codebook: &Codebook,
        vectors: u64,
        records: Option<RecordInfo>,
    ) -> Result<StreamHeader> {
        // First, because it validates the codebook.
        let codebook_fingerprint = fingerprint(codebook)?;
        Ok(StreamHeader {
            size: codebook.size() as u64,
            bits: codebook.bits_per_index(),
            vectors,
            codebook_fingerprint,
            dimension: codebook.dimension as u64,
            records,
            image: None,
        })
    }
}

fn format_error(stage: &'static str, message: String) -> Error {
    Error::new(stage, ErrorKind::Format(message))
}

/// The same fault reported under this module's stage (e.g. a packing or
/// validation error met while reading a file).
fn restage(stage: &'static str, e: Error) -> Error {
    format_error(stage, e.kind().to_string())
}

/// A header as the file holds it.
fn serialised_header(stage: &'static str, header: &impl Serialize) -> Result<Vec<u8>> {
    postcard::to_allocvec(header)
        .map_err(|e| format_error(stage, format!("the header cannot be serialised: {e}")))
}

/// Magic, version, header length and header, with room for the payload and CRC.
fn begin_file(
    kind: FileKind,
    stage: &'static str,
    header: &impl Serialize,
    payload_capacity: usize,
) -> Result<Vec<u8>> {
    let header_bytes = serialised_header(stage, header)?;
    let header_len = u32::try_from(header_bytes.len()).map_err(|_| {
        format_error(
            stage,
            format!("the header of {} bytes is too long", header_bytes.len()),
        )
    })?;
    let mut out = Vec::with_capacity(FIXED_LEN + header_bytes.len() + payload_capacity);
    out.extend_from_slice(&kind.magic());
    out.extend_from_slice(&FORMAT_VERSION.to_le_bytes());
    out.extend_from_slice(&header_len.to_le_bytes());
    out.extend_from_slice(&header_bytes);
    Ok(out)
}

/// Appends the CRC-32 of everything written so far.
fn end_file(mut out: Vec<u8>) -> Vec<u8> {
    let crc = crc32fast::hash(&out);
    out.extend_from_slice(&crc.to_le_bytes());
    out
}

/// The two variable parts of a file whose frame has been checked.
struct Parts<'a> {
    header: &'a [u8],
    payload: &'a [u8],
}

/// Checks magic, version and the fixed lengths of a file of `len` bytes
/// whose first bytes are `head` (all of them, or at least [`PREFIX_LEN`]),
/// and returns the header length.
fn check_prefix(head: &[u8], len: u64, kind: FileKind) -> Result<u32> {
    let stage = kind.reading();
    let fail = |message: String| Err(format_error(stage, message));
    let truncated = || {
        format!(
            "truncated file: {len} bytes is shorter than the {FIXED_LEN} bytes every {} file has",
            kind.noun()
        )
    };

    let magic = kind.magic();
    if len < magic.len() as u64 {
        if len > 0 && magic.starts_with(head) {
            return fail(truncated());
        }
        if len == 0 {
            return fail("the file is empty".into());
        }
    }
    if !head.starts_with(&magic) {
        if head.starts_with(&kind.other().magic()) {
            return fail(format!(
                "this is a vqforge {}, not a {}",
                kind.other().noun(),
                kind.noun()
            ));
        }
        return fail(format!("not a vqforge {} file", kind.noun()));
    }

    if len < 10 {
        return fail(truncated());
    }
    let version = u16::from_le_bytes([head[8], head[9]]);
    if version != FORMAT_VERSION {
        return fail(format!(
            "unsupported format version {version}: this build reads version {FORMAT_VERSION}"
        ));
    }

    if len < FIXED_LEN as u64 {
        return fail(truncated());
    }
    let header_len = u32::from_le_bytes([head[10], head[11], head[12], head[13]]);
    let room = len - FIXED_LEN as u64;
    if u64::from(header_len) > room {
        return fail(format!(
            "truncated file: the header length says {header_len} bytes, \
             but only {room} bytes lie between the fixed parts"
        ));
    }
    Ok(header_len)
}

/// The checksum error of a file of `len` bytes, saying so when `header`
/// (which may be corrupt) describes a file of another length.
fn checksum_error(
    stage: &'static str,
    len: u64,
    header: &[u8],
    payload_len: fn(&[u8]) -> Option<u64>,
) -> Error {
    let described =
        payload_len(header).and_then(|p| p.checked_add((FIXED_LEN + header.len()) as u64));
    match described {
        Some(total) if total != len => format_error(
            stage,
            format!(
                "checksum mismatch: the file is corrupted or truncated \
                 (it has {len} bytes, its header describes {total})"
            ),
        ),
        _ => format_error(stage, "checksum mismatch: the file is corrupted".into()),
    }
}

/// Checks magic, version, lengths and checksum, and splits off the header
/// and payload. `payload_len` tells, from header bytes that may be corrupt,
/// how long the payload should be; it only improves the checksum message.
fn open_file<'a>(
    bytes: &'a [u8],
    kind: FileKind,
    payload_len: fn(&[u8]) -> Option<u64>,
) -> Result<Parts<'a>> {
    let len = bytes.len();
    let header_len = check_prefix(bytes, len as u64, kind)?;
    let header_end = PREFIX_LEN + header_len as usize;
    let body_end = len - CRC_LEN;
    let header = &bytes[PREFIX_LEN..header_end];

    let stored = u32::from_le_bytes([
        bytes[body_end],
        bytes[body_end + 1],
        bytes[body_end + 2],
        bytes[body_end + 3],
    ]);
    if crc32fast::hash(&bytes[..body_end]) != stored {
        return Err(checksum_error(
            kind.reading(),
            len as u64,
            header,
            payload_len,
        ));
    }

    Ok(Parts {
        header,
        payload: &bytes[header_end..body_end],
    })
}

/// Longest header the file readers accept. Headers hold column names and
/// scales: a table of a million columns with 40-byte names stays below it.
const MAX_HEADER_LEN: u32 = 64 << 20;

/// Reads the file at `path` so that nothing larger than the header is held
/// before the header's numbers are checked: first the prefix and the
/// header, which `header_ok` parses and checks against the payload's length
/// and the limits; if they pass, the whole file, read once (the caller's
/// decoding verifies the checksum). If they do not, the rest is streamed
/// through the checksum without being kept, so that a damaged file gets the
/// checksum's message first, as from the in-memory readers. Errors name no
/// file.
fn read_file_checked(
    path: &Path,
    kind: FileKind,
    payload_len: fn(&[u8]) -> Option<u64>,
    header_ok: &dyn Fn(&[u8], u64) -> Result<()>,
) -> Result<Vec<u8>> {
    use std::io::{Read, Seek};
    let stage = kind.reading();
    let io = |e: std::io::Error| Error::new(stage, ErrorKind::Io(e));
    let mut file = std::fs::File::open(path).map_err(io)?;
    let len = file.metadata().map_err(io)?.len();
    let mut head = Vec::with_capacity(PREFIX_LEN);
    (&mut file)
        .take(PREFIX_LEN as u64)
        .read_to_end(&mut head)
        .map_err(io)?;
    let header_len = check_prefix(&head, len, kind)?;
    if header_len > MAX_HEADER_LEN {
        return Err(format_error(
            stage,
            format!(
                "the header length says {header_len} bytes, more than the {MAX_HEADER_LEN} \
                 bytes any {} header takes; the file is corrupted",
                kind.noun()
            ),
        ));
    }
    let mut header = vec![0; header_len as usize];
    file.read_exact(&mut header).map_err(io)?;
    let payload = len - (FIXED_LEN as u64 + u64::from(header_len));
    if let Err(refused) = header_ok(&header, payload) {
        let mut crc = crc32fast::Hasher::new();
        crc.update(&head);
        crc.update(&header);
        let mut rest = (&mut file).take(payload);
        let mut buffer = vec![0; 1 << 16];
        loop {
            let n = rest.read(&mut buffer).map_err(io)?;
            if n == 0 {
                break;
            }
            crc.update(&buffer[..n]);
        }
        let mut stored = [0; CRC_LEN];
        file.read_exact(&mut stored).map_err(io)?;
        if crc.finalize() != u32::from_le_bytes(stored) {
            return Err(checksum_error(stage, len, &header, payload_len));
        }
        return Err(refused);
    }
    let size = usize::try_from(len).map_err(|_| {
        Error::new(
            stage,
            ErrorKind::Limit(format!(
                "the file has {len} bytes, more than this computer can address"
            )),
        )
    })?;
    let mut bytes = limits::vec_with_capacity(size, stage, "the file")?;
    file.rewind().map_err(io)?;
    file.read_to_end(&mut bytes).map_err(io)?;
    Ok(bytes)
}

/// Deserialises a header that must use every one of its bytes.
fn parse_header<'a, T: Deserialize<'a>>(stage: &'static str, header: &'a [u8]) -> Result<T> {
    let (value, rest) = postcard::take_from_bytes::<T>(header)
        .map_err(|e| format_error(stage, format!("the header cannot be read: {e}")))?;
    if !rest.is_empty() {
        return Err(format_error(
            stage,
            format!(
                "the header has {} unexpected bytes after its fields",
                rest.len()
            ),
        ));
    }
    Ok(value)
}

fn book_payload_len(size: u64, dimension: u64) -> Option<u64> {
    size.checked_mul(dimension)?.checked_mul(4)
}

/// The codebook file's bytes. Fails if the codebook does not pass
/// [`Codebook::validate`].
pub fn codebook_to_bytes(codebook: &Codebook) -> Result<Vec<u8>> {
    const STAGE: &str = "writing codebook";
    codebook.validate().map_err(|e| restage(STAGE, e))?;
    let header = BookHeader {
        dimension: codebook.dimension as u64,
        size: codebook.size() as u64,
        meaning: codebook.meaning.clone(),
        training: codebook.training.clone(),
    };
    let payload_len = codebook.codewords.len() * 4;
    let mut out = begin_file(FileKind::Codebook, STAGE, &header, payload_len)?;
    for value in &codebook.codewords {
        out.extend_from_slice(&value.to_le_bytes());
    }
    Ok(end_file(out))
}

/// The payload length a codebook header (which may be corrupt) describes.
fn described_book_payload(header: &[u8]) -> Option<u64> {
    let h: BookHeader = postcard::from_bytes(header).ok()?;
    book_payload_len(h.size, h.dimension)
}

/// Checks a codebook header against its payload's length and the limits.
fn check_book_header(header: &BookHeader, payload_len: u64, limits: &Limits) -> Result<()> {
    const STAGE: &str = "reading codebook";
    let fail = |message: String| Err(format_error(STAGE, message));
    if header.dimension == 0 {
        return fail("the header says the codewords have 0 components".into());
    }
    if header.size == 0 {
        return fail("the header says the codebook has 0 codewords".into());
    }
    match book_payload_len(header.size, header.dimension) {
        Some(n) if n == payload_len => {}
        described => {
            let described =
                described.map_or_else(|| "more than 2^64".to_string(), |n| n.to_string());
            return fail(format!(
                "the header describes {} codewords of dimension {} ({described} bytes), \
                 but the payload has {payload_len} bytes",
                header.size, header.dimension,
            ));
        }
    }
    limits.check_codewords(STAGE, "the codebook", header.size)
}

/// Reads a codebook from its file's bytes, refusing anything malformed,
/// corrupted, truncated or inconsistent (see the module doc for the order),
/// within the default [`Limits`].
pub fn codebook_from_bytes(bytes: &[u8]) -> Result<Codebook> {
    codebook_from_bytes_with(bytes, &Limits::default())
}

/// [`codebook_from_bytes`] within `limits`: a codebook of more than
/// [`Limits::max_codewords`] codewords is an [`ErrorKind::Limit`] error.
pub fn codebook_from_bytes_with(bytes: &[u8], limits: &Limits) -> Result<Codebook> {
    const STAGE: &str = "reading codebook";
    let parts = open_file(bytes, FileKind::Codebook, described_book_payload)?;
    let header: BookHeader = parse_header(STAGE, parts.header)?;
    let payload = parts.payload;
    check_book_header(&header, payload.len() as u64, limits)?;
    // The payload length now vouches for both numbers fitting in memory.
    let dimension = usize::try_from(header.dimension)
        .map_err(|_| format_error(STAGE, "the dimension does not fit in memory".into()))?;
    let mut codewords: Vec<f32> =
        limits::vec_with_capacity(payload.len() / 4, STAGE, "the codewords")?;
    codewords.extend(
        payload
            .chunks_exact(4)
            .map(|b| f32::from_le_bytes([b[0], b[1], b[2], b[3]])),
    );
    let codebook = Codebook {
        dimension,
        codewords,
        meaning: header.meaning,
        training: header.training,
    };
    codebook.validate().map_err(|e| restage(STAGE, e))?;
    Ok(codebook)
}

/// Writes `codebook` to `path` atomically (all or nothing).
pub fn write_codebook(path: impl AsRef<Path>, codebook: &Codebook) -> Result<()> {
    let path = path.as_ref();
    let bytes = codebook_to_bytes(codebook).map_err(|e| e.in_file(path.display().to_string()))?;
    write_atomic(path, &bytes)
}

/// Reads and checks the codebook file at `path` within the default
/// [`Limits`]. Errors name the file.
pub fn read_codebook(path: impl AsRef<Path>) -> Result<Codebook> {
    read_codebook_with(path, &Limits::default())
}

/// [`read_codebook`] within `limits`. The header is read and checked
/// against the file's length and the limits before the codewords are, so
/// a header claiming billions of codewords costs only its own bytes.
pub fn read_codebook_with(path: impl AsRef<Path>, limits: &Limits) -> Result<Codebook> {
    read_with(
        path.as_ref(),
        FileKind::Codebook,
        described_book_payload,
        check_book_header,
        codebook_from_bytes_with,
        limits,
    )
}

/// Reads the file at `path` with [`read_file_checked`], checking its
/// header of type `H` with `check` before the payload is read, then
/// decodes it with `decode`. Errors name the file.
fn read_with<H: serde::de::DeserializeOwned, T>(
    path: &Path,
    kind: FileKind,
    described: fn(&[u8]) -> Option<u64>,
    check: fn(&H, u64, &Limits) -> Result<()>,
    decode: fn(&[u8], &Limits) -> Result<T>,
    limits: &Limits,
) -> Result<T> {
    let header_ok = |header: &[u8], payload_len: u64| {
        let header: H = parse_header(kind.reading(), header)?;
        check(&header, payload_len, limits)
    };
    read_file_checked(path, kind, described, &header_ok)
        .and_then(|bytes| decode(&bytes, limits))
        .map_err(|e| e.in_file(path.display().to_string()))
}

/// A 32-bit fingerprint of a codebook: the CRC field of its file bytes.
/// Streams record it so decoding can tell that a stream was made with
/// another codebook. Equal codebooks always have equal fingerprints; a
/// codebook read back from its file has the fingerprint it was written with.
pub fn fingerprint(codebook: &Codebook) -> Result<u32> {
    let bytes = codebook_to_bytes(codebook)?;
    let crc = &bytes[bytes.len() - CRC_LEN..];
    Ok(u32::from_le_bytes([crc[0], crc[1], crc[2], crc[3]]))
}

/// Checks a stream header's own numbers (not the payload).
fn check_stream_header(stage: &'static str, header: &StreamHeader) -> Result<()> {
    let fail = |message: String| Err(format_error(stage, message));
    if header.size == 0 {
        return fail("the header says the codebook has 0 codewords".into());
    }
    if header.size > MAX_STREAM_SIZE {
        return fail(format!(
            "{} codewords cannot be indexed with 32-bit indices",
            header.size
        ));
    }
    if header.dimension == 0 {
        return fail("the header says the vectors have 0 components".into());
    }
    let size = usize::try_from(header.size).map_err(|_| {
        format_error(
            stage,
            format!("{} codewords do not fit in memory", header.size),
        )
    })?;
    let needed = bits_for_size(size);
    if header.bits != needed {
        return fail(format!(
            "the header says {} bits per index, but {} codewords take {needed}",
            header.bits, header.size
        ));
    }
    if let Some(time) = header.records.as_ref().and_then(|r| r.time.as_ref()) {
        if !time.start.is_finite() || !time.step.is_finite() {
            return fail("the time axis has a start or step that is not finite".into());
        }
    }
    Ok(())
}

/// The position of the first index that is not below `size`, with the index.
fn first_out_of_range(indices: &[u32], size: u64) -> Option<(usize, u32)> {
    indices
        .iter()
        .position(|&i| u64::from(i) >= size)
        .map(|at| (at, indices[at]))
}

/// The stream file's bytes. Fails if the header is inconsistent (bits not
/// ⌈log2 size⌉, `vectors` not the number of indices) or an index is not
/// below `size`.
pub fn stream_to_bytes(header: &StreamHeader, indices: &[u32]) -> Result<Vec<u8>> {
    const STAGE: &str = "writing stream";
    check_stream_header(STAGE, header)?;
    if header.vectors != indices.len() as u64 {
        return Err(format_error(
            STAGE,
            format!(
                "the header says {} vectors, but {} indices were given",
                header.vectors,
                indices.len()
            ),
        ));
    }
    if let Some((at, index)) = first_out_of_range(indices, header.size) {
        return Err(format_error(
            STAGE,
            format!(
                "index {index} of vector {at} is outside the codebook of {} codewords",
                header.size
            ),
        ));
    }
    let payload_len = packed_len(header.vectors, header.bits).unwrap_or(0);
    let out = begin_file(FileKind::Stream, STAGE, header, payload_len as usize)?;
    let mut packer = BitPacker::new(out, header.bits).map_err(|e| restage(STAGE, e))?;
    for &index in indices {
        packer.push(index).map_err(|e| restage(STAGE, e))?;
    }
    let out = packer.finish().map_err(|e| restage(STAGE, e))?;
    Ok(end_file(out))
}

/// Bytes of the stream file [`stream_to_bytes`] writes for `header` and
/// `header.vectors` indices, without packing them: what a stream costs.
pub fn stream_file_len(header: &StreamHeader) -> Result<u64> {
    const STAGE: &str = "sizing stream";
    check_stream_header(STAGE, header)?;
    let header_bytes = serialised_header(STAGE, header)?;
    let payload = packed_len(header.vectors, header.bits)
        .ok_or_else(|| format_error(STAGE, "the stream is too long to size".into()))?;
    Ok(FIXED_LEN as u64 + header_bytes.len() as u64 + payload)
}

/// The payload length a stream header (which may be corrupt) describes.
fn described_stream_payload(header: &[u8]) -> Option<u64> {
    let h: StreamHeader = postcard::from_bytes(header).ok()?;
    packed_len(h.vectors, h.bits)
}

/// Checks a stream header's numbers, against its payload's length and the
/// limits too.
fn check_stream_payload(header: &StreamHeader, payload_len: u64, limits: &Limits) -> Result<()> {
    const STAGE: &str = "reading stream";
    check_stream_header(STAGE, header)?;
    match packed_len(header.vectors, header.bits) {
        Some(n) if n == payload_len => {}
        described => {
            let described =
                described.map_or_else(|| "more than 2^64".to_string(), |n| n.to_string());
            return Err(format_error(
                STAGE,
                format!(
                    "the header describes {} indices of {} bits ({described} bytes), \
                     but the payload has {payload_len} bytes",
                    header.vectors, header.bits,
                ),
            ));
        }
    }
    limits.check_vectors(STAGE, "the stream", header.vectors)
}

/// Reads a stream from its file's bytes, refusing anything malformed,
/// corrupted, truncated or inconsistent, including any index not below the
/// header's codebook size, within the default [`Limits`].
pub fn stream_from_bytes(bytes: &[u8]) -> Result<(StreamHeader, Vec<u32>)> {
    stream_from_bytes_with(bytes, &Limits::default())
}

/// [`stream_from_bytes`] within `limits`: a stream of more than
/// [`Limits::max_vectors`] indices is an [`ErrorKind::Limit`] error.
pub fn stream_from_bytes_with(bytes: &[u8], limits: &Limits) -> Result<(StreamHeader, Vec<u32>)> {
    const STAGE: &str = "reading stream";
    let parts = open_file(bytes, FileKind::Stream, described_stream_payload)?;
    let header: StreamHeader = parse_header(STAGE, parts.header)?;
    let payload = parts.payload;
    check_stream_payload(&header, payload.len() as u64, limits)?;
    let count = usize::try_from(header.vectors)
        .map_err(|_| format_error(STAGE, "the index count does not fit in memory".into()))?;
    let indices = unpack_indices(payload, count, header.bits).map_err(|e| restage(STAGE, e))?;
    if let Some((at, index)) = first_out_of_range(&indices, header.size) {
        return Err(format_error(
            STAGE,
            format!(
                "index {index} of vector {at} is outside the codebook of {} codewords",
                header.size
            ),
        ));
    }
    Ok((header, indices))
}

/// Writes a stream to `path` atomically (all or nothing).
pub fn write_stream(path: impl AsRef<Path>, header: &StreamHeader, indices: &[u32]) -> Result<()> {
    let path = path.as_ref();
    let bytes =
        stream_to_bytes(header, indices).map_err(|e| e.in_file(path.display().to_string()))?;
    write_atomic(path, &bytes)
}

/// Reads and checks the stream file at `path` within the default
/// [`Limits`]. Errors name the file.
pub fn read_stream(path: impl AsRef<Path>) -> Result<(StreamHeader, Vec<u32>)> {
    read_stream_with(path, &Limits::default())
}

/// [`read_stream`] within `limits`. The header is read and checked against
/// the file's length and the limits before the indices are.
pub fn read_stream_with(
    path: impl AsRef<Path>,
    limits: &Limits,
) -> Result<(StreamHeader, Vec<u32>)> {
    read_with(
        path.as_ref(),
        FileKind::Stream,
        described_stream_payload,
        check_stream_payload,
        stream_from_bytes_with,
        limits,
    )
}

/// Which vqforge file the file at `path` is, from its first eight bytes
/// (nothing else is checked); `None` for anything else.
pub fn detect_file_kind(path: impl AsRef<Path>) -> Result<Option<FileKind>> {
    use std::io::Read;
    let path = path.as_ref();
    let mut head = Vec::with_capacity(8);
    std::fs::File::open(path)
        .and_then(|f| f.take(8).read_to_end(&mut head))
        .map_err(|e| {
            Error::new("reading file", ErrorKind::Io(e)).in_file(path.display().to_string())
        })?;
    Ok(detect_kind(&head))
}

/// Checks that a stream belongs with `codebook`: same size, dimension and
/// fingerprint, and, for table records, a row count that matches the
/// codebook's frame length.
pub fn check_stream_matches(header: &StreamHeader, codebook: &Codebook) -> Result<()> {
    const STAGE: &str = "checking stream";
    let mismatch = |message: String| Err(Error::new(STAGE, ErrorKind::Mismatch(message)));
    codebook.validate()?;
    if header.size != codebook.size() as u64 || header.dimension != codebook.dimension as u64 {
        return mismatch(format!(
            "the stream was made with a different codebook: it refers to {} codewords \
             of dimension {}, this codebook has {} of dimension {}",
            header.size,
            header.dimension,
            codebook.size(),
            codebook.dimension
        ));
    }
    let own = fingerprint(codebook)?;
    if header.codebook_fingerprint != own {
        return mismatch(format!(
            "the stream was made with a different codebook \
             (fingerprint {:08x}, this codebook's is {own:08x})",
            header.codebook_fingerprint
        ));
    }
    if let Some(image) = &header.image {
        if !matches!(codebook.meaning, Meaning::Pixels(_)) {
            return mismatch("the stream holds an image, but the codebook is not a palette".into());
        }
        let pixels = image.width as u64 * image.height as u64;
        if pixels != header.vectors || pixels == 0 {
            return Err(format_error(
                STAGE,
                format!(
                    "the stream says the image is {}×{}, but it holds {} indices",
                    image.width, image.height, header.vectors
                ),
            ));
        }
    }
    if let Some(records) = &header.records {
        let Meaning::Records(layout) = &codebook.meaning else {
            return mismatch(
                "the stream holds table records, but the codebook has no record layout".into(),
            );
        };
        let frame = layout.frame as u64;
        let frames = records.rows / frame + u64::from(records.rows % frame != 0);
        if frames != header.vectors {
            return Err(format_error(
                STAGE,
                format!(
                    "the stream says {} table rows, which make {frames} frames of {frame}, \
                     but it holds {} indices",
                    records.rows, header.vectors
                ),
            ));
        }
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::codebook::{ColumnScale, RecordLayout, Scaling, TimeFormat};
    use crate::kmeans::{Seeding, StopReason};
    use crate::pack::pack_indices;
    use crate::rng::SeededRng;

    fn facts() -> TrainingFacts {
        TrainingFacts {
            seed: 42,
            restarts: 3,
            seeding: Seeding::Split,
            iterations: 17,
            stopped_by: StopReason::Tolerance,
            vectors: 1000,
            distinct_vectors: 912,
            mse_scaled: 0.125,
        }
    }

    /// Three codewords of two columns × a frame of two rows.
    fn record_book() -> Codebook {
        Codebook {
            dimension: 4,
            codewords: vec![
                0.0, 1.0, 0.5, -1.0, //
                2.5, -0.25, 1e-7, 3.0e5, //
                -7.0, 0.125, 9.0, 1.0,
            ],
            meaning: Meaning::Records(RecordLayout {
                columns: vec!["temperature".into(), "humidity".into()],
                frame: 2,
                scaling: Scaling::ZScore,
                scales: vec![
                    ColumnScale {
                        offset: 21.5,
                        factor: 3.25,
                    },
                    ColumnScale {
                        offset: 55.0,
                        factor: 12.0,
                    },
                ],
                time_column: Some("time".into()),
            }),
            training: facts(),
        }
    }

    fn plain_book(size: usize, dimension: usize, seed: u64) -> Codebook {
        let mut rng = SeededRng::new(seed);
        Codebook {
            dimension,
            codewords: (0..size * dimension).map(|_| rng.normal() as f32).collect(),
            meaning: Meaning::Plain,
            training: facts(),
        }
    }

    fn stream_header(size: u64, vectors: u64) -> StreamHeader {
        StreamHeader {
            size,
            bits: bits_for_size(size as usize),
            vectors,
            codebook_fingerprint: 0x1234_5678,
            dimension: 3,
            records: None,
            image: None,
        }
    }

    /// A file with any header and payload, correctly framed and checksummed,
    /// to test what readers make of well-sealed nonsense.
    fn sealed(kind: FileKind, header: &impl Serialize, payload: &[u8]) -> Vec<u8> {
        let mut out = begin_file(kind, "test", header, payload.len()).unwrap();
        out.extend_from_slice(payload);
        end_file(out)
    }

    /// Recomputes the CRC after a deliberate edit.
    fn reseal(bytes: &mut Vec<u8>) {
        bytes.truncate(bytes.len() - CRC_LEN);
        let crc = crc32fast::hash(bytes);
        bytes.extend_from_slice(&crc.to_le_bytes());
    }

    fn message(e: Error) -> String {
        e.to_string()
    }

    #[test]
    fn stream_length_without_packing_is_the_written_length() {
        for (size, vectors) in [(4u64, 4u64), (3, 0), (1000, 12_345), (70_000, 77)] {
            let header = stream_header(size, vectors);
            let written = stream_to_bytes(&header, &vec![0; vectors as usize]).unwrap();
            assert_eq!(stream_file_len(&header).unwrap(), written.len() as u64);
        }
        let mut wrong = stream_header(4, 4);
        wrong.bits = 5;
        assert!(stream_file_len(&wrong).is_err());
    }

    #[test]
    fn crc_is_crc32_iso_hdlc() {
        // Check value of CRC-32/ISO-HDLC (the "IEEE" CRC-32 of zlib and PNG)
        // from the CRC catalogue (reveng.sourceforge.io/crc-catalogue).
        assert_eq!(crc32fast::hash(b"123456789"), 0xCBF4_3926);
    }

    /// Pins the exact bytes, so a reordered field or enum variant anywhere
    /// in the header types (which would silently change the format) fails
    /// here. Expected bytes worked by hand from postcard's published wire
    /// format (unsigned varints, f64 as 8 little-endian bytes); the CRC was
    /// computed independently with Python's `zlib.crc32`.
    #[test]
    fn bytes_are_pinned() {
        let header = StreamHeader {
            size: 4,
            bits: 2,
            vectors: 4,
            codebook_fingerprint: 0x1234_5678,
            dimension: 3,
            records: None,
            image: None,
        };
        let expected: [u8; 30] = [
            b'V',
            b'Q',
            b'F',
            b'O',
            b'R',
            b'G',
            b'E',
            b'S', // magic
            0x01,
            0x00, // version 1
            0x0B,
            0x00,
            0x00,
            0x00, // header length 11
            0x04,
            0x02,
            0x04, // size 4, bits 2, vectors 4
            0xF8,
            0xAC,
            0xD1,
            0x91,
            0x01, // fingerprint 0x12345678 as a varint
            0x03,
            0x00,
            0x00,        // dimension 3, records None, image None
            0b0100_1110, // indices 1 0 3 2
            0x36,
            0x58,
            0x5A,
            0x3C, // CRC-32 0x3C5A5836
        ];
        assert_eq!(stream_to_bytes(&header, &[1, 0, 3, 2]).unwrap(), expected);

        let book = Codebook {
            dimension: 2,
            codewords: vec![1.0, -2.0],
            meaning: Meaning::Plain,
            training: facts(),
        };
        let bytes = codebook_to_bytes(&book).unwrap();
        let header: [u8; 20] = [
            0x02, 0x01, // dimension 2, size 1
            0x01, // meaning: variant 1, Plain
            0x2A, 0x03, 0x01, 0x11, // seed 42, restarts 3, Split, 17 iterations
            0x01, // stopped by Tolerance
            0xE8, 0x07, 0x90, 0x07, // 1000 vectors, 912 distinct
            0, 0, 0, 0, 0, 0, 0xC0, 0x3F, // mse 0.125
        ];
        assert_eq!(&bytes[..8], b"VQFORGEB");
        assert_eq!(&bytes[8..14], &[1, 0, 20, 0, 0, 0]);
        assert_eq!(&bytes[14..34], &header);
        // 1.0 and -2.0 as f32 little-endian
        assert_eq!(&bytes[34..42], &[0, 0, 0x80, 0x3F, 0, 0, 0, 0xC0]);
        assert_eq!(bytes.len(), 46);
    }

    #[test]
    fn codebook_round_trip_with_record_layout() {
        let book = record_book();
        let bytes = codebook_to_bytes(&book).unwrap();
        assert_eq!(&bytes[..8], b"VQFORGEB");
        assert_eq!(&bytes[8..10], &[1, 0]);
        assert_eq!(detect_kind(&bytes), Some(FileKind::Codebook));
        assert_eq!(codebook_from_bytes(&bytes).unwrap(), book);
        let plain = plain_book(5, 3, 1);
        assert_eq!(
            codebook_from_bytes(&codebook_to_bytes(&plain).unwrap()).unwrap(),
            plain
        );
    }

    #[test]
    fn codebook_payload_is_f32_little_endian_before_the_crc() {
        let book = plain_book(2, 2, 3);
        let bytes = codebook_to_bytes(&book).unwrap();
        let header_len = u32::from_le_bytes(bytes[10..14].try_into().unwrap()) as usize;
        assert_eq!(bytes.len(), FIXED_LEN + header_len + 16);
        let payload = &bytes[PREFIX_LEN + header_len..bytes.len() - CRC_LEN];
        assert_eq!(&payload[..4], &book.codewords[0].to_le_bytes());
        let crc = u32::from_le_bytes(bytes[bytes.len() - 4..].try_into().unwrap());
        assert_eq!(crc, crc32fast::hash(&bytes[..bytes.len() - 4]));
        assert_eq!(fingerprint(&book).unwrap(), crc);
    }

    #[test]
    fn stream_round_trips_at_several_sizes() {
        let mut rng = SeededRng::new(5);
        for size in [1u64, 2, 3, 256, 1000] {
            for vectors in [0u64, 1, 7, 501] {
                let indices: Vec<u32> = (0..vectors).map(|_| rng.below(size) as u32).collect();
                let mut header = stream_header(size, vectors);
                if size == 3 {
                    header.records = Some(RecordInfo {
                        rows: 2 * vectors,
                        time: Some(TimeAxis {
                            start: 1.7e9,
                            step: 60.0,
                            format: TimeFormat::DateTime {
                                t_separator: true,
                                seconds: false,
                                slashes: false,
                            },
                        }),
                    });
                }
                let bytes = stream_to_bytes(&header, &indices).unwrap();
                assert_eq!(&bytes[..8], b"VQFORGES");
                assert_eq!(detect_kind(&bytes), Some(FileKind::Stream));
                let (back, got) = stream_from_bytes(&bytes).unwrap();
                assert_eq!(back, header, "k = {size}, n = {vectors}");
                assert_eq!(got, indices, "k = {size}, n = {vectors}");
            }
        }
    }

    #[test]
    fn stream_payload_is_the_packed_indices() {
        let header = stream_header(4, 4);
        let bytes = stream_to_bytes(&header, &[1, 0, 3, 2]).unwrap();
        // The byte before the CRC is the whole payload: 01 00 11 10.
        assert_eq!(bytes[bytes.len() - CRC_LEN - 1], 0b0100_1110);
    }

    #[test]
    fn every_bit_flip_is_refused() {
        let book = codebook_to_bytes(&record_book()).unwrap();
        let stream = stream_to_bytes(&stream_header(5, 9), &[0, 1, 2, 3, 4, 4, 3, 2, 1]).unwrap();
        for (name, file) in [("codebook", &book), ("stream", &stream)] {
            for at in 0..file.len() {
                for bit in 0..8 {
                    let mut bad = file.clone();
                    bad[at] ^= 1 << bit;
                    let refused = if name == "codebook" {
                        codebook_from_bytes(&bad).is_err()
                    } else {
                        stream_from_bytes(&bad).is_err()
                    };
                    assert!(refused, "{name}: flip of bit {bit} at byte {at} accepted");
                }
            }
        }
    }

    #[test]
    fn every_truncation_is_refused() {
        let book = codebook_to_bytes(&record_book()).unwrap();
        for len in 0..book.len() {
            assert!(codebook_from_bytes(&book[..len]).is_err(), "length {len}");
        }
        let stream = stream_to_bytes(&stream_header(1000, 20), &[999; 20]).unwrap();
        for len in 0..stream.len() {
            assert!(stream_from_bytes(&stream[..len]).is_err(), "length {len}");
        }
        let e = message(stream_from_bytes(&stream[..stream.len() - 3]).unwrap_err());
        assert!(e.contains("corrupted or truncated"), "{e}");
        let e = message(codebook_from_bytes(&book[..5]).unwrap_err());
        assert!(e.contains("truncated file"), "{e}");
        let e = message(codebook_from_bytes(&book[..20]).unwrap_err());
        assert!(e.contains("truncated file: the header length says"), "{e}");
        let e = message(codebook_from_bytes(&[]).unwrap_err());
        assert_eq!(e, "reading codebook: the file is empty");
    }

    /// The message of reading `bytes` from a file, without the file name.
    fn file_message(dir: &Path, bytes: &[u8], kind: FileKind, limits: &Limits) -> Option<String> {
        let path = dir.join("f");
        std::fs::write(&path, bytes).unwrap();
        let e = match kind {
            FileKind::Codebook => read_codebook_with(&path, limits).err(),
            FileKind::Stream => read_stream_with(&path, limits).err(),
        }?;
        let prefix = format!("{}: ", path.display());
        Some(message(e).replacen(&prefix, "", 1))
    }

    #[test]
    fn file_readers_say_what_the_byte_readers_say() {
        // The file readers check the header before reading the payload; they
        // must refuse exactly what the in-memory readers refuse, alike.
        let dir = tempfile::tempdir().unwrap();
        let limits = Limits::default();
        let book = codebook_to_bytes(&record_book()).unwrap();
        let stream = stream_to_bytes(&stream_header(5, 9), &[0, 1, 2, 3, 4, 4, 3, 2, 1]).unwrap();
        for (kind, file) in [(FileKind::Codebook, &book), (FileKind::Stream, &stream)] {
            let in_memory = |bytes: &[u8]| match kind {
                FileKind::Codebook => codebook_from_bytes(bytes).err().map(message),
                FileKind::Stream => stream_from_bytes(bytes).err().map(message),
            };
            let mut damaged: Vec<Vec<u8>> = (0..file.len()).map(|n| file[..n].to_vec()).collect();
            for at in 0..file.len() {
                for bit in [0, 3, 7] {
                    let mut bad = file.clone();
                    bad[at] ^= 1 << bit;
                    damaged.push(bad.clone());
                    reseal(&mut bad);
                    damaged.push(bad);
                }
            }
            for bad in &damaged {
                let want = in_memory(bad);
                let got = file_message(dir.path(), bad, kind, &limits);
                assert_eq!(got, want, "{kind:?}, {} bytes", bad.len());
            }
        }
    }

    #[test]
    fn file_readers_check_limits_before_reading_the_payload() {
        let dir = tempfile::tempdir().unwrap();
        let book = codebook_to_bytes(&plain_book(8, 2, 3)).unwrap();
        let tight = Limits {
            max_codewords: 7,
            max_vectors: 20,
            ..Limits::default()
        };
        let e = file_message(dir.path(), &book, FileKind::Codebook, &tight).unwrap();
        assert_eq!(
            e,
            "reading codebook: the codebook has 8 codewords, above the limit of 7; \
             raise it with --max-codewords"
        );
        assert!(codebook_from_bytes_with(&book, &tight).is_err());
        let fits = Limits {
            max_codewords: 8,
            ..tight
        };
        assert!(file_message(dir.path(), &book, FileKind::Codebook, &fits).is_none());

        let stream = stream_to_bytes(&stream_header(4, 21), &[3; 21]).unwrap();
        let e = file_message(dir.path(), &stream, FileKind::Stream, &tight).unwrap();
        assert!(
            e.ends_with(
                "the stream has 21 vectors, above the limit of 20; raise it with --max-vectors"
            ),
            "{e}"
        );

        // A well-sealed header claiming 4 billion codewords of 1000
        // components (16 TB) in a file of a few dozen bytes: refused from
        // the header and the file length alone.
        let header = BookHeader {
            dimension: 1000,
            size: 4_000_000_000,
            meaning: Meaning::Plain,
            training: facts(),
        };
        let bytes = sealed(FileKind::Codebook, &header, &[0; 16]);
        let e = file_message(dir.path(), &bytes, FileKind::Codebook, &Limits::default()).unwrap();
        assert!(e.contains("4000000000 codewords of dimension 1000 (16000000000000 bytes), but the payload has 16 bytes"), "{e}");
    }

    #[test]
    fn unknown_version_is_named() {
        let mut bytes = codebook_to_bytes(&record_book()).unwrap();
        bytes[8..10].copy_from_slice(&2u16.to_le_bytes());
        reseal(&mut bytes);
        assert_eq!(
            message(codebook_from_bytes(&bytes).unwrap_err()),
            "reading codebook: unsupported format version 2: this build reads version 1"
        );
    }

    #[test]
    fn wrong_magic_and_other_kind_are_named() {
        let book = codebook_to_bytes(&record_book()).unwrap();
        let stream = stream_to_bytes(&stream_header(2, 1), &[1]).unwrap();
        assert_eq!(
            message(stream_from_bytes(&book).unwrap_err()),
            "reading stream: this is a vqforge codebook, not a stream"
        );
        assert_eq!(
            message(codebook_from_bytes(&stream).unwrap_err()),
            "reading codebook: this is a vqforge stream, not a codebook"
        );
        let png = b"\x89PNG\r\n\x1a\n\0\0\0\rIHDR\0\0\0\0";
        assert_eq!(
            message(codebook_from_bytes(png).unwrap_err()),
            "reading codebook: not a vqforge codebook file"
        );
        assert_eq!(
            message(stream_from_bytes(b"ab").unwrap_err()),
            "reading stream: not a vqforge stream file"
        );
        assert_eq!(detect_kind(png), None);
    }

    #[test]
    fn huge_claims_are_refused_before_allocating() {
        let mut header = BookHeader {
            dimension: 1_000_000_000,
            size: 4_000_000_000,
            meaning: Meaning::Plain,
            training: facts(),
        };
        let bytes = sealed(FileKind::Codebook, &header, &[0; 16]);
        let e = message(codebook_from_bytes(&bytes).unwrap_err());
        assert!(e.contains("but the payload has 16 bytes"), "{e}");
        header.size = u64::MAX;
        let bytes = sealed(FileKind::Codebook, &header, &[0; 16]);
        let e = message(codebook_from_bytes(&bytes).unwrap_err());
        assert!(e.contains("more than 2^64"), "{e}");

        let mut stream = stream_header(2, u64::MAX);
        let bytes = sealed(FileKind::Stream, &stream, &[0; 4]);
        assert!(stream_from_bytes(&bytes).is_err());
        stream.vectors = 4_000_000_000;
        let bytes = sealed(FileKind::Stream, &stream, &[0; 4]);
        let e = message(stream_from_bytes(&bytes).unwrap_err());
        assert!(e.contains("500000000 bytes"), "{e}");
        let bytes = sealed(FileKind::Stream, &stream_header(1 << 40, 1), &[0; 5]);
        let e = message(stream_from_bytes(&bytes).unwrap_err());
        assert!(e.contains("cannot be indexed with 32-bit indices"), "{e}");
    }

    #[test]
    fn inconsistent_stream_headers_are_refused() {
        // Two bits can hold 3, but a codebook of 3 has no codeword 3.
        let header = stream_header(3, 2);
        let bytes = sealed(
            FileKind::Stream,
            &header,
            &pack_indices(&[1, 3], 2).unwrap(),
        );
        let e = message(stream_from_bytes(&bytes).unwrap_err());
        assert!(e.contains("index 3 of vector 1 is outside"), "{e}");
        assert!(stream_to_bytes(&header, &[1, 3]).is_err());

        let mut wide = stream_header(3, 2);
        wide.bits = 3;
        let bytes = sealed(FileKind::Stream, &wide, &pack_indices(&[1, 2], 3).unwrap());
        let e = message(stream_from_bytes(&bytes).unwrap_err());
        assert!(
            e.contains("3 bits per index, but 3 codewords take 2"),
            "{e}"
        );
        assert!(stream_to_bytes(&wide, &[1, 2]).is_err());

        // Non-zero padding bits after the last index.
        let bytes = sealed(FileKind::Stream, &stream_header(2, 3), &[0b1010_0001]);
        let e = message(stream_from_bytes(&bytes).unwrap_err());
        assert!(e.starts_with("reading stream: "), "{e}");
        assert!(e.contains("padding bits"), "{e}");

        assert!(stream_to_bytes(&stream_header(4, 3), &[0, 1]).is_err());
        assert!(stream_to_bytes(&stream_header(0, 0), &[]).is_err());
    }

    #[test]
    fn bad_headers_are_refused() {
        let good = BookHeader {
            dimension: 2,
            size: 1,
            meaning: Meaning::Plain,
            training: facts(),
        };
        // Every field present, one byte too many.
        let mut header_bytes = postcard::to_allocvec(&good).unwrap();
        header_bytes.push(0);
        let mut bytes = Vec::new();
        bytes.extend_from_slice(&CODEBOOK_MAGIC);
        bytes.extend_from_slice(&FORMAT_VERSION.to_le_bytes());
        bytes.extend_from_slice(&(header_bytes.len() as u32).to_le_bytes());
        bytes.extend_from_slice(&header_bytes);
        bytes.extend_from_slice(&[0; 8]);
        let bytes = end_file(bytes);
        let e = message(codebook_from_bytes(&bytes).unwrap_err());
        assert!(e.contains("1 unexpected bytes"), "{e}");

        // Not a header at all.
        let bytes = sealed(FileKind::Codebook, &[0xFFu8; 3], &[]);
        let e = message(codebook_from_bytes(&bytes).unwrap_err());
        assert!(e.contains("the header cannot be read"), "{e}");

        // Well-formed, but a codeword is not a number.
        let mut payload = Vec::new();
        payload.extend_from_slice(&1.0f32.to_le_bytes());
        payload.extend_from_slice(&f32::NAN.to_le_bytes());
        let bytes = sealed(FileKind::Codebook, &good, &payload);
        let e = message(codebook_from_bytes(&bytes).unwrap_err());
        assert_eq!(e, "reading codebook: a codeword holds a non-finite value");

        // A record layout that disagrees with the dimension.
        let mut header = good.clone();
        let Meaning::Records(layout) = record_book().meaning else {
            unreachable!("the sample book holds records")
        };
        header.meaning = Meaning::Records(layout);
        let bytes = sealed(FileKind::Codebook, &header, &[0; 8]);
        let e = message(codebook_from_bytes(&bytes).unwrap_err());
        assert!(e.contains("disagrees with dimension 2"), "{e}");
    }

    #[test]
    fn writers_refuse_invalid_codebooks() {
        let mut book = plain_book(2, 2, 9);
        book.codewords.pop();
        let e = message(codebook_to_bytes(&book).unwrap_err());
        assert!(e.starts_with("writing codebook: "), "{e}");
        assert!(fingerprint(&book).is_err());
    }

    #[test]
    fn stream_is_checked_against_its_codebook() {
        let book = record_book();
        let records = Some(RecordInfo {
            rows: 5,
            time: None,
        });
        let header = StreamHeader::for_codebook(&book, 3, records).unwrap();
        assert_eq!(header.bits, 2);
        check_stream_matches(&header, &book).unwrap();

        let mut other = book.clone();
        other.codewords[0] = 0.5;
        let e = check_stream_matches(&header, &other).unwrap_err();
        assert!(matches!(e.kind(), ErrorKind::Mismatch(_)));
        assert!(
            message(e).contains("the stream was made with a different codebook"),
            "fingerprint"
        );

        let smaller = plain_book(2, 4, 1);
        let e = message(check_stream_matches(&header, &smaller).unwrap_err());
        assert!(
            e.contains("different codebook: it refers to 3 codewords"),
            "{e}"
        );

        let mut too_many_rows = header.clone();
        too_many_rows.records = Some(RecordInfo {
            rows: 7,
            time: None,
        });
        let e = message(check_stream_matches(&too_many_rows, &book).unwrap_err());
        assert!(e.contains("7 table rows, which make 4 frames of 2"), "{e}");

        let plain = plain_book(3, 4, 2);
        let mut plain_header = StreamHeader::for_codebook(&plain, 3, None).unwrap();
        check_stream_matches(&plain_header, &plain).unwrap();
        plain_header.records = Some(RecordInfo {
            rows: 3,
            time: None,
        });
        let e = message(check_stream_matches(&plain_header, &plain).unwrap_err());
        assert!(e.contains("no record layout"), "{e}");
    }

    #[test]
    fn files_round_trip_and_errors_name_them() {
        let dir = tempfile::tempdir().unwrap();
        let book_path = dir.path().join("sensors.vqb");
        let stream_path = dir.path().join("sensors.vqs");
        let book = record_book();
        write_codebook(&book_path, &book).unwrap();
        assert_eq!(read_codebook(&book_path).unwrap(), book);
        let file = std::fs::read(&book_path).unwrap();
        assert_eq!(
            fingerprint(&book).unwrap().to_le_bytes(),
            file[file.len() - 4..]
        );

        let header = StreamHeader::for_codebook(&book, 4, None).unwrap();
        write_stream(&stream_path, &header, &[2, 0, 1, 2]).unwrap();
        let (back, indices) = read_stream(&stream_path).unwrap();
        assert_eq!(back, header);
        assert_eq!(indices, [2, 0, 1, 2]);
        check_stream_matches(&back, &read_codebook(&book_path).unwrap()).unwrap();

        let e = read_codebook(&stream_path).unwrap_err();
        assert_eq!(
            message(e),
            format!(
                "reading codebook: {}: this is a vqforge stream, not a codebook",
                stream_path.display()
            )
        );
        let missing = dir.path().join("missing.vqs");
        let e = read_stream(&missing).unwrap_err();
        assert!(matches!(e.kind(), ErrorKind::Io(_)));
        assert_eq!(e.position().file, Some(missing.display().to_string()));
    }
}
