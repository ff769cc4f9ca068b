//! typst as an in-process PDF engine: a minimal `World` holding one generated source file and
//! the fonts bundled with typst-assets (no system fonts, no network, no packages), with the
//! run date as "today", so the same source gives the same PDF bytes.

use std::collections::BTreeMap;
use std::sync::OnceLock;

use typst::diag::{FileError, FileResult, SourceDiagnostic};
use typst::foundations::{Bytes, Datetime, Duration, Smart};
use typst::syntax::{FileId, RootedPath, Source, VirtualPath, VirtualRoot};
use typst::text::{Font, FontBook};
use typst::utils::LazyHash;
use typst::{Library, LibraryExt, World, WorldExt};

/// Fonts and font book, loaded once per process.
fn fonts() -> &'static (Vec<Font>, LazyHash<FontBook>) {
    static FONTS: OnceLock<(Vec<Font>, LazyHash<FontBook>)> = OnceLock::new();
    FONTS.get_or_init(|| {
        let fonts: Vec<Font> = typst_assets::fonts()
            .flat_map(|d| Font::iter(Bytes::new(d)))
            .collect();
        let book = LazyHash::new(FontBook::from_fonts(&fonts));
        (fonts, book)
    })
}

struct ReportWorld {
    library: LazyHash<Library>,
    main: Source,
    today: Datetime,
    /// Extra files by project path without the leading slash, e.g. `fig/0.svg`.
    files: BTreeMap<String, Bytes>,
}

impl World for ReportWorld {
    fn library(&self) -> &LazyHash<Library> {
        &self.library
    }
    fn book(&self) -> &LazyHash<FontBook> {
        &fonts().1
    }
    fn main(&self) -> FileId {
        self.main.id()
    }
    fn source(&self, id: FileId) -> FileResult<Source> {
        if id == self.main.id() {
            Ok(self.main.clone())
        } else {
            Err(FileError::NotFound(id.vpath().get_without_slash().into()))
        }
    }
    fn file(&self, id: FileId) -> FileResult<Bytes> {
        let path = id.vpath().get_without_slash();
        self.files
            .get(path)
            .cloned()
            .ok_or_else(|| FileError::NotFound(path.into()))
    }
    fn font(&self, index: usize) -> Option<Font> {
        fonts().0.get(index).cloned()
    }
    fn today(&self, _offset: Option<Duration>) -> Option<Datetime> {
        Some(self.today)
    }
}

/// A typst error mapped to a line of the generated source.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct TypstProblem {
    pub line: usize,
    pub message: String,
    pub source_line: String,
}

fn problems(world: &ReportWorld, diags: &[SourceDiagnostic]) -> Vec<TypstProblem> {
    diags
        .iter()
        .map(|d| {
            let range = world.range(d.span);
            let line = range
                .and_then(|r| world.main.lines().byte_to_line(r.start))
                .map_or(0, |l| l + 1);
            TypstProblem {
                line,
                message: d.message.to_string(),
                source_line: world
                    .main
                    .text()
                    .lines()
                    .nth(line.saturating_sub(1))
                    .unwrap_or_default()
                    .to_string(),
            }
        })
        .collect()
}

/// Compile typst source to PDF. `date` is (year, month, day); `ident` seeds the PDF's document id;
/// `files` are (project path without leading slash, bytes) the source may read.
pub fn compile_pdf(
    source: String,
    date: (i32, u8, u8),
    ident: &str,
    files: Vec<(String, Vec<u8>)>,
) -> Result<Vec<u8>, Vec<TypstProblem>> {
    let id = FileId::new(RootedPath::new(
        VirtualRoot::Project,
        VirtualPath::new("/report.typ").map_err(|e| {
            vec![TypstProblem {
                line: 0,
                message: format!("{e:?}"),
                source_line: String::new(),
            }]
        })?,
    ));
    let today = Datetime::from_ymd(date.0, date.1, date.2).ok_or_else(|| {
        vec![TypstProblem {
            line: 0,
            message: format!("invalid run date {date:?}"),
            source_line: String::new(),
        }]
    })?;
    let world = ReportWorld {
        library: LazyHash::new(Library::builder().build()),
        main: Source::new(id, source),
        today,
        files: files.into_iter().map(|(p, b)| (p, Bytes::new(b))).collect(),
    };
    let warned = typst::compile(&world);
    let doc = warned.output.map_err(|e| problems(&world, &e))?;
    let timestamp =
        Datetime::from_ymd_hms(date.0, date.1, date.2, 0, 0, 0).map(typst_pdf::Timestamp::new_utc);
    let options = typst_pdf::PdfOptions {
        ident: Smart::Custom(ident.to_string()),
        creator: Smart::Custom(Some(format!("beamproof {}", env!("CARGO_PKG_VERSION")))),
        timestamp,
        ..Default::default()
    };
    typst_pdf::pdf(&doc, &options).map_err(|e| problems(&world, &e))
}
