//! Writing an output file atomically: to a temporary name first, renamed into
//! place only when the whole run has succeeded (see [`FileStager`]).

use crate::block::FileStager;
use std::fs::File;
use std::io::{BufWriter, Write};
use std::path::{Path, PathBuf};

/// A buffered writer to a temporary file that becomes `path` on success.
/// Dropped without [`OutputFile::finish`], it deletes the temporary file.
pub struct OutputFile {
    writer: Option<BufWriter<File>>,
    temp: PathBuf,
    path: PathBuf,
}

impl OutputFile {
    pub fn create(path: &Path) -> std::io::Result<OutputFile> {
        if let Some(dir) = path.parent().filter(|d| !d.as_os_str().is_empty()) {
            std::fs::create_dir_all(dir)?;
        }
        let temp = FileStager::temp_path(path);
        let file = File::create(&temp)
            .map_err(|e| std::io::Error::new(e.kind(), format!("cannot create {}: {e}", temp.display())))?;
        Ok(OutputFile { writer: Some(BufWriter::with_capacity(1 << 16, file)), temp, path: path.to_path_buf() })
    }

    /// The final path.
    pub fn path(&self) -> &Path {
        &self.path
    }

    pub fn writer(&mut self) -> &mut BufWriter<File> {
        self.writer.as_mut().expect("writer present until finish")
    }

    /// Flush, sync and hand the file to the stager for the final rename.
    pub fn finish(mut self, stager: &FileStager) -> std::io::Result<()> {
        let w = self.writer.take().expect("finish called once");
        let file = w.into_inner().map_err(|e| e.into_error())?;
        file.sync_all()?;
        stager.stage(self.temp.clone(), self.path.clone());
        self.temp = PathBuf::new();
        Ok(())
    }
}

impl Write for OutputFile {
    fn write(&mut self, buf: &[u8]) -> std::io::Result<usize> {
        self.writer().write(buf)
    }
    fn flush(&mut self) -> std::io::Result<()> {
        self.writer().flush()
    }
}

impl Drop for OutputFile {
    fn drop(&mut self) {
        if self.writer.is_some() {
            self.writer = None;
            let _ = std::fs::remove_file(&self.temp);
        }
    }
}
