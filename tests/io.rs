//! Integration tests: io (reader rules of data-format.md, writers, round trip, inspect).

use formfactory::data::{
    Current, Diagram, Projector, Series, ThreePointData, ThreePointKey, TwoPointData, TwoPointKey,
};
use formfactory::io;
use std::collections::BTreeMap;

fn small_twopt() -> TwoPointData {
    let mut channels = BTreeMap::new();
    let mut s = Series::zeros(2, 2);
    s.re = vec![1.5, 1.25, 0.5, 2.5e-7];
    s.im = vec![0.0, -0.0, 1e-20, 3.0];
    channels.insert(
        TwoPointKey {
            momentum: [0, 0, 1],
            smear: None,
        },
        s,
    );
    TwoPointData {
        configs: vec![4, 10],
        channels,
    }
}

fn small_threept() -> ThreePointData {
    let mut channels = BTreeMap::new();
    let mut s = Series::zeros(2, 1);
    s.re = vec![0.25, -0.75];
    s.im = vec![1.0, 2.0];
    channels.insert(
        ThreePointKey {
            tsep: 1,
            pf: [0, 0, 0],
            q: [1, 0, 0],
            current: Current::V4,
            projector: Projector::Unpol,
            flavor: Some("u".into()),
            diagram: Some(Diagram::Connected),
        },
        s,
    );
    ThreePointData {
        configs: vec![7],
        channels,
    }
}

#[test]
fn writers_are_deterministic_and_in_documented_order() {
    let mut a = Vec::new();
    io::write_twopt(&small_twopt(), &mut a).unwrap();
    let mut b = Vec::new();
    io::write_twopt(&small_twopt(), &mut b).unwrap();
    assert_eq!(a, b);
    assert_eq!(
        String::from_utf8(a).unwrap(),
        "config,px,py,pz,t,re,im\n\
         4,0,0,1,0,1.5,0\n\
         10,0,0,1,0,1.25,-0\n\
         4,0,0,1,1,0.5,1e-20\n\
         10,0,0,1,1,2.5e-7,3\n"
    );
    let mut c = Vec::new();
    io::write_threept(&small_threept(), &mut c).unwrap();
    assert_eq!(
        String::from_utf8(c).unwrap(),
        "config,tsep,tau,pfx,pfy,pfz,qx,qy,qz,current,projector,re,im,flavor,diagram\n\
         7,1,0,0,0,0,1,0,0,V4,unpol,0.25,1,u,connected\n\
         7,1,1,0,0,0,1,0,0,V4,unpol,-0.75,2,u,connected\n"
    );
}

#[test]
fn writer_refuses_non_finite_and_misshapen_series() {
    let mut d = small_twopt();
    d.channels.values_mut().next().unwrap().re[1] = f64::NAN;
    assert!(matches!(
        io::write_twopt(&d, Vec::new()),
        Err(formfactory::Error::Table { .. })
    ));
    let mut d = small_threept();
    d.channels.values_mut().next().unwrap().n_t = 3;
    assert!(matches!(
        io::write_threept(&d, Vec::new()),
        Err(formfactory::Error::Table { .. })
    ));
}
