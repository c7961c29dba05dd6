//! Standard input (`-`): raw samples piped from a live receiver. No seeking
//! and no length, so progress is unknown and the end is wherever the pipe
//! closes (a partial last frame is an error).

use super::raw::raw_info;
use super::reader::{CaptureReader, Format, FrameStream, OpenOptions};
use lobeflow_blocks::BlockError;

pub fn open_stdin(opts: &OpenOptions) -> Result<Box<dyn CaptureReader>, BlockError> {
    if !matches!(opts.format, Format::Raw) {
        return Err(BlockError::new("standard input ('-') needs format raw, a datatype (e.g. cu8) and a rate"));
    }
    let info = raw_info("-", opts, None)?;
    // Stdin buffers internally; large reads go straight through.
    Ok(Box::new(FrameStream::new(info, std::io::stdin())))
}
