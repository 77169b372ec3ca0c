//! The status line's message: what just happened, or what went wrong.

use eframe::egui::Color32;

/// How a message reads.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub enum Level {
    /// Something happened as asked.
    Info,
    /// Done, but not quite as asked, or something the user should know (read-only, estimated).
    Warning,
    /// Refused or failed.
    Error,
}

/// A message for the status line.
#[derive(Clone, Debug, PartialEq, Eq)]
pub struct Status {
    pub text: String,
    pub level: Level,
}

impl Status {
    #[must_use]
    pub fn info(text: impl Into<String>) -> Self {
        Self {
            text: text.into(),
            level: Level::Info,
        }
    }

    #[must_use]
    pub fn warning(text: impl Into<String>) -> Self {
        Self {
            text: text.into(),
            level: Level::Warning,
        }
    }

    #[must_use]
    pub fn error(text: impl Into<String>) -> Self {
        Self {
            text: text.into(),
            level: Level::Error,
        }
    }

    #[must_use]
    pub fn is_error(&self) -> bool {
        self.level == Level::Error
    }

    /// The colour the status line shows it in.
    #[must_use]
    pub fn colour(&self) -> Color32 {
        match self.level {
            Level::Info => Color32::from_gray(200),
            Level::Warning => Color32::from_rgb(236, 190, 84),
            Level::Error => Color32::from_rgb(240, 120, 100),
        }
    }
}
