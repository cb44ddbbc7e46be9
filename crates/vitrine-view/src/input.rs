//! What the viewer can be asked to do, and the keys that ask: every command of the page — from a
//! key, a button or a script — is one [`Action`], and [`key_action`] is the one key map. The help
//! overlay lists [`KEYS`], so the keys and their help cannot drift apart.

use crate::sketch::Mode;

/// Every command the viewer takes. The web layer turns keys and buttons into these and carries
/// them out in one place.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Action {
    ZoomIn,
    ZoomOut,
    /// The whole map in view.
    Fit,
    /// Moves the view by this many canvas pixels (positive: the map moves right, down).
    Pan {
        dx: f64,
        dy: f64,
    },
    /// The next map (similarity, lattice, timeline, …), fitted.
    NextMap,
    /// Opens the record card of the item nearest the centre of the view.
    OpenNearest,
    /// With a card open: its nearest neighbour not yet walked through.
    NextNeighbour,
    /// With a card open: the card before it.
    PreviousCard,
    /// Drops what is under way, in this order: a keyboard lasso, a selection mode, then every
    /// open panel (record card, help, about, filter panel).
    Escape,
    /// Lasso or rectangle mode (the same mode again: back to moving the map).
    SetMode(Mode),
    SelectAll,
    /// The items in view become the selection (`add`: are added to it).
    SelectView {
        add: bool,
    },
    ClearSelection,
    Undo,
    Redo,
    /// In a selection mode: a point of a keyboard lasso (a corner of a rectangle) at the view's
    /// centre; on the first point, `add` or `subtract` say what the shape will do.
    KeyPoint {
        add: bool,
        subtract: bool,
    },
    /// Closes the keyboard lasso and applies it.
    KeyClose,
    FocusSearch,
    ToggleFilterPanel,
    ToggleHelp,
    ToggleAbout,
    /// Paper (reading-room) or neutral grey surround.
    ToggleTheme,
    /// The coding view over the corpus's items.
    OpenCoding,
}

/// One key press as the page saw it.
#[derive(Debug, Clone, Copy)]
pub struct KeyPress<'a> {
    /// The key's value (`KeyboardEvent.key`): "a", "A", "Enter", "ArrowLeft", " ", …
    pub key: &'a str,
    pub shift: bool,
    /// Ctrl, or Cmd on a Mac.
    pub ctrl: bool,
    pub alt: bool,
    /// The focus is on a button, link or disclosure, whose own Enter and Space these are.
    pub on_control: bool,
}

/// Canvas pixels an arrow key moves the view.
pub const PAN_STEP: f64 = 80.0;
/// The zoom factor of one key press or button click.
pub const ZOOM_STEP: f64 = 1.4;

/// What the viewer is doing when a key comes: a lasso or rectangle mode is on (`selecting`), a
/// keyboard lasso or rectangle is under way (`sketching`).
#[derive(Debug, Clone, Copy, Default)]
pub struct Doing {
    pub selecting: bool,
    pub sketching: bool,
}

/// The action of a key (None: the key is not the viewer's, and the page keeps its own meaning:
/// Space scrolls, Enter presses a focused button).
pub fn key_action(k: &KeyPress, doing: Doing) -> Option<Action> {
    let selecting = doing.selecting;
    if k.ctrl {
        return match k.key.to_lowercase().as_str() {
            "z" if k.shift => Some(Action::Redo),
            "z" => Some(Action::Undo),
            "y" => Some(Action::Redo),
            _ => None,
        };
    }
    match k.key {
        "Enter" if !k.on_control && selecting => {
            return Some(Action::KeyPoint {
                add: k.shift,
                subtract: k.alt,
            })
        }
        " " if !k.on_control && doing.sketching => return Some(Action::KeyClose),
        _ => {}
    }
    if k.alt {
        return None;
    }
    Some(match k.key {
        "+" | "=" => Action::ZoomIn,
        "-" | "_" => Action::ZoomOut,
        "0" | "f" => Action::Fit,
        "ArrowLeft" => Action::Pan {
            dx: PAN_STEP,
            dy: 0.0,
        },
        "ArrowRight" => Action::Pan {
            dx: -PAN_STEP,
            dy: 0.0,
        },
        "ArrowUp" => Action::Pan {
            dx: 0.0,
            dy: PAN_STEP,
        },
        "ArrowDown" => Action::Pan {
            dx: 0.0,
            dy: -PAN_STEP,
        },
        "Enter" if !k.on_control => Action::OpenNearest,
        "Escape" => Action::Escape,
        "n" => Action::NextNeighbour,
        "Backspace" => Action::PreviousCard,
        "l" => Action::SetMode(Mode::Lasso),
        "r" => Action::SetMode(Mode::Rectangle),
        "a" => Action::SelectAll,
        "v" => Action::SelectView { add: false },
        "V" => Action::SelectView { add: true },
        "x" => Action::ClearSelection,
        "/" => Action::FocusSearch,
        "c" => Action::ToggleFilterPanel,
        "m" => Action::NextMap,
        "?" => Action::ToggleHelp,
        "i" => Action::ToggleAbout,
        "g" => Action::ToggleTheme,
        "k" => Action::OpenCoding,
        _ => return None,
    })
}

/// The keys as the help overlay lists them: (keys, what they do).
pub const KEYS: &[(&str, &str)] = &[
    ("drag, arrow keys", "move the map"),
    ("wheel, pinch, + and −", "zoom (the point under the pointer stays put)"),
    ("0 or f", "show the whole map"),
    ("m", "the next map (similarity, lattice, timeline)"),
    ("click, or Enter", "open the record card of an item (Enter: the one nearest the centre of the view)"),
    ("n, Backspace", "in a record card: walk to the nearest neighbour not yet seen, and back"),
    (". and ,", "mark the record card's item (else the one under the pointer) \"like these\" or \"not these\" to grow the corpus"),
    ("l, r", "lasso or rectangle mode: drag to select (again, or Escape, to move the map)"),
    ("Shift-drag, Alt-drag", "add to the selection, take away from it (in any mode)"),
    ("Enter, Space", "in lasso or rectangle mode, from the keyboard: Enter drops a point (a corner) at the centre of the view; move the view and Enter again; Space closes the lasso (Shift+Enter or Alt+Enter first: add or take away)"),
    ("Ctrl-click", "add one item to the selection, or take it out"),
    ("a, v, Shift+V, x", "select every item, what is in view, add what is in view; clear"),
    ("Ctrl+Z, Ctrl+Shift+Z", "undo, redo"),
    ("/", "search every text and category field"),
    ("c", "filters by field: values with their counts, number and date ranges"),
    ("g", "paper or neutral grey surround"),
    ("k", "the coding view: code the corpus's items against the codebook, from the keyboard"),
    ("i, ?", "about this atlas; this list"),
    ("Escape", "drop what is under way, then close every panel"),
];

#[cfg(test)]
mod tests {
    use super::*;

    const IDLE: Doing = Doing {
        selecting: false,
        sketching: false,
    };
    const SELECTING: Doing = Doing {
        selecting: true,
        sketching: false,
    };
    const SKETCHING: Doing = Doing {
        selecting: true,
        sketching: true,
    };

    fn press(key: &str) -> KeyPress<'_> {
        KeyPress {
            key,
            shift: false,
            ctrl: false,
            alt: false,
            on_control: false,
        }
    }

    #[test]
    fn keys_give_their_actions_and_modifiers_change_them() {
        assert_eq!(
            key_action(&press("r"), IDLE),
            Some(Action::SetMode(Mode::Rectangle))
        );
        assert_eq!(
            key_action(&press("l"), IDLE),
            Some(Action::SetMode(Mode::Lasso))
        );
        assert_eq!(key_action(&press("b"), IDLE), None);
        assert_eq!(
            key_action(&press("V"), IDLE),
            Some(Action::SelectView { add: true })
        );
        let ctrl_z = KeyPress {
            ctrl: true,
            ..press("Z")
        };
        assert_eq!(key_action(&ctrl_z, IDLE), Some(Action::Undo));
        let ctrl_shift_z = KeyPress {
            shift: true,
            ..ctrl_z
        };
        assert_eq!(key_action(&ctrl_shift_z, IDLE), Some(Action::Redo));
        // Ctrl with another key is the browser's (copy, paste, find).
        assert_eq!(
            key_action(
                &KeyPress {
                    ctrl: true,
                    ..press("c")
                },
                IDLE
            ),
            None
        );
        // Alt alone leaves letters to the browser and the system.
        assert_eq!(
            key_action(
                &KeyPress {
                    alt: true,
                    ..press("m")
                },
                IDLE
            ),
            None
        );
    }

    #[test]
    fn enter_and_space_depend_on_the_mode_and_the_focus() {
        // Moving the map: Enter opens the record nearest the centre; Space is the page's.
        assert_eq!(key_action(&press("Enter"), IDLE), Some(Action::OpenNearest));
        assert_eq!(key_action(&press(" "), IDLE), None);
        // Selecting: Enter drops a point (Shift adds, Alt takes away), Space closes.
        assert_eq!(
            key_action(&press("Enter"), SELECTING),
            Some(Action::KeyPoint {
                add: false,
                subtract: false
            })
        );
        let alt_enter = KeyPress {
            alt: true,
            ..press("Enter")
        };
        assert_eq!(
            key_action(&alt_enter, SELECTING),
            Some(Action::KeyPoint {
                add: false,
                subtract: true
            })
        );
        // Space closes a keyboard lasso under way; else it is the page's (it scrolls).
        assert_eq!(key_action(&press(" "), SELECTING), None);
        assert_eq!(key_action(&press(" "), SKETCHING), Some(Action::KeyClose));
        // On a button or link, Enter and Space are the control's own.
        let on_button = KeyPress {
            on_control: true,
            ..press("Enter")
        };
        assert_eq!(key_action(&on_button, SELECTING), None);
        assert_eq!(key_action(&on_button, IDLE), None);
    }

    #[test]
    fn every_key_the_help_names_is_mapped() {
        // The single keys of the help's left column, each as typed.
        let singles = [
            "0",
            "f",
            "m",
            "Enter",
            "n",
            "Backspace",
            "l",
            "r",
            "a",
            "v",
            "x",
            "/",
            "c",
            "g",
            "i",
            "?",
            "Escape",
            "+",
            "-",
        ];
        for k in singles {
            assert!(
                key_action(&press(k), IDLE).is_some() || key_action(&press(k), SELECTING).is_some(),
                "{k} has no action"
            );
            assert!(
                KEYS.iter()
                    .any(|(keys, _)| keys.split([',', ' ']).any(|w| w == k)
                        || (k == "-" && keys.contains('−'))
                        || (k == "Enter" && keys.contains("Enter"))),
                "{k} is not in the help"
            );
        }
    }
}
