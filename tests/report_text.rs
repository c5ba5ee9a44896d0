//! Terminal tables.

mod common;

use common::fixture;
use fitaudit::report::text;

#[test]
fn show() {
    let r = fixture::cooling();
    println!("{}", text::fit_table(Some("Cooling"), &fixture::specs(), &r.fit));
    println!("{}", text::verdict_lines(&fixture::hostile()));
    println!("{:?}", r.fit.parameters);
    println!("{} {} {}", r.fit.chi2, r.fit.p_value, r.fit.condition_number);
}
