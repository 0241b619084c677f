//! Synthetic surveys whose answer is known (work in progress, issue 4).
