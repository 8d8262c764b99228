//! Line numbers of key paths in a YAML document, so that validation errors found after
//! deserialisation can still point at a line.

use std::collections::HashMap;
use yaml_rust2::parser::{Event, MarkedEventReceiver, Parser};
use yaml_rust2::scanner::Marker;

/// Maps key paths (`parameters[1].range`, `simulator.command[2]`) to 1-based lines.
#[derive(Debug, Default, Clone)]
pub struct LineIndex {
    lines: HashMap<String, usize>,
}

enum Frame {
    Map { key: Option<String> },
    Seq { index: usize },
}

#[derive(Default)]
struct Builder {
    stack: Vec<Frame>,
    lines: HashMap<String, usize>,
}

impl Builder {
    fn path(&self) -> String {
        let mut p = String::new();
        for frame in &self.stack {
            match frame {
                Frame::Map { key: Some(k) } => {
                    if !p.is_empty() {
                        p.push('.');
                    }
                    p.push_str(k);
                }
                Frame::Map { key: None } => {}
                Frame::Seq { index } => p.push_str(&format!("[{index}]")),
            }
        }
        p
    }

    /// A value (scalar or collection) has started at `line` in the current frame.
    fn value_starts(&mut self, line: usize) {
        if matches!(self.stack.last(), Some(Frame::Seq { .. })) {
            let path = self.path();
            self.lines.entry(path).or_insert(line);
        }
    }

    /// A value has ended: advance the parent frame.
    fn value_ends(&mut self) {
        match self.stack.last_mut() {
            Some(Frame::Map { key }) => *key = None,
            Some(Frame::Seq { index }) => *index += 1,
            None => {}
        }
    }
}

impl MarkedEventReceiver for Builder {
    fn on_event(&mut self, ev: Event, mark: Marker) {
        let line = mark.line();
        match ev {
            Event::Scalar(text, ..) => {
                if let Some(Frame::Map { key: None }) = self.stack.last() {
                    if let Some(Frame::Map { key }) = self.stack.last_mut() {
                        *key = Some(text);
                    }
                    let path = self.path();
                    self.lines.entry(path).or_insert(line);
                } else {
                    self.value_starts(line);
                    self.value_ends();
                }
            }
            Event::MappingStart(..) => {
                self.value_starts(line);
                self.stack.push(Frame::Map { key: None });
            }
            Event::SequenceStart(..) => {
                self.value_starts(line);
                self.stack.push(Frame::Seq { index: 0 });
            }
            Event::MappingEnd | Event::SequenceEnd => {
                self.stack.pop();
                self.value_ends();
            }
            Event::Alias(_) => {
                self.value_starts(line);
                self.value_ends();
            }
            _ => {}
        }
    }
}

impl LineIndex {
    /// Index the YAML `text`. A text that does not parse gives an empty index (the
    /// deserialiser reports the syntax error with its own line).
    pub fn new(text: &str) -> Self {
        let mut b = Builder::default();
        let mut parser = Parser::new_from_str(text);
        if parser.load(&mut b, false).is_err() {
            return Self::default();
        }
        Self { lines: b.lines }
    }

    /// Line of `path`, or of its nearest ancestor that has one.
    pub fn line(&self, path: &str) -> Option<usize> {
        let mut p = path.to_string();
        loop {
            if let Some(l) = self.lines.get(&p) {
                return Some(*l);
            }
            let cut = p.rfind(['.', '['])?;
            p.truncate(cut);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn finds_nested_keys_and_items() {
        let text = "name: a\nparameters:\n  - name: E\n    range: [1, 2]\n  - name: k\n    range: [3, 4]\nsimulator:\n  command: [\"x\", \"{{E}}\"]\n  files:\n    - {template: t, to: u}\n";
        let ix = LineIndex::new(text);
        assert_eq!(ix.line("name"), Some(1));
        assert_eq!(ix.line("parameters[0].range"), Some(4));
        assert_eq!(ix.line("parameters[1]"), Some(5));
        assert_eq!(ix.line("parameters[1].range"), Some(6));
        assert_eq!(ix.line("simulator.command[1]"), Some(8));
        assert_eq!(ix.line("simulator.files[0].to"), Some(10));
        assert_eq!(ix.line("parameters[1].prior"), Some(5));
    }
}
