use super::*;

// Modbus 123.456f check values: REFERENCES.md 7c (IEEE 754 single precision, 0x42F6E979).
const F123_456: [(Order, [u16; 2]); 4] = [
    (Order::Abcd, [0x42F6, 0xE979]),
    (Order::Cdab, [0xE979, 0x42F6]),
    (Order::Badc, [0xF642, 0x79E9]),
    (Order::Dcba, [0x79E9, 0xF642]),
];

#[test]
fn f32_123_456_in_all_four_orders() {
    for (order, words) in F123_456 {
        let v = decode(&words, DataType::F32, order);
        assert_eq!(v, f64::from(123.456_f32), "{order}");
        assert_eq!(encode(123.456, DataType::F32, order).unwrap(), words);
    }
}

#[test]
fn f32_small_values() {
    // REFERENCES.md 7c: 1.0f = 0x3F800000 → ABCD [0x3F80, 0x0000], CDAB [0x0000, 0x3F80].
    assert_eq!(decode(&[0x3F80, 0x0000], DataType::F32, Order::Abcd), 1.0);
    assert_eq!(decode(&[0x0000, 0x3F80], DataType::F32, Order::Cdab), 1.0);
    // Byte-swapped forms of the same bits (hand-derived from 0x3F800000).
    assert_eq!(decode(&[0x803F, 0x0000], DataType::F32, Order::Badc), 1.0);
    assert_eq!(decode(&[0x0000, 0x803F], DataType::F32, Order::Dcba), 1.0);
    // REFERENCES.md 7c: 100.0f = 0x42C80000.
    assert_eq!(decode(&[0x42C8, 0x0000], DataType::F32, Order::Abcd), 100.0);
    assert_eq!(decode(&[0x0000, 0x42C8], DataType::F32, Order::Cdab), 100.0);
    // REFERENCES.md 7c: -2.5f = 0xC0200000.
    assert_eq!(decode(&[0xC020, 0x0000], DataType::F32, Order::Abcd), -2.5);
    assert_eq!(decode(&[0x0000, 0x20C0], DataType::F32, Order::Dcba), -2.5);
}

#[test]
fn sixteen_bit_values() {
    // Two's complement (hand-computed): i16 -1 = 0xFFFF, i16 -32768 = 0x8000.
    assert_eq!(decode(&[0xFFFF], DataType::I16, Order::Abcd), -1.0);
    assert_eq!(decode(&[0xFFFF], DataType::U16, Order::Abcd), 65535.0);
    assert_eq!(decode(&[0x8000], DataType::I16, Order::Abcd), -32768.0);
    // Modbus V1.1b3 §6.3 example: register 108 holds 0x022B = 555.
    assert_eq!(decode(&[0x022B], DataType::U16, Order::Abcd), 555.0);
    // Word order is meaningless for one register; the byte order swaps it.
    assert_eq!(decode(&[0x022B], DataType::U16, Order::Cdab), 555.0);
    assert_eq!(decode(&[0x2B02], DataType::U16, Order::Badc), 555.0);
    assert_eq!(decode(&[0x2B02], DataType::U16, Order::Dcba), 555.0);
    // i16 -2 = 0xFFFE (hand-computed); swapped bytes 0xFEFF.
    assert_eq!(decode(&[0xFEFF], DataType::I16, Order::Badc), -2.0);
}

#[test]
fn thirty_two_bit_integers() {
    // 123456789 = 0x075BCD15 (hand-computed: 7·2^24 + 0x5B·2^16 + 0xCD·2^8 + 0x15).
    let cases = [
        (Order::Abcd, [0x075B, 0xCD15]),
        (Order::Cdab, [0xCD15, 0x075B]),
        (Order::Badc, [0x5B07, 0x15CD]),
        (Order::Dcba, [0x15CD, 0x5B07]),
    ];
    for (order, words) in cases {
        assert_eq!(decode(&words, DataType::U32, order), 123_456_789.0);
        assert_eq!(decode(&words, DataType::I32, order), 123_456_789.0);
        assert_eq!(encode(123_456_789.0, DataType::U32, order).unwrap(), words);
    }
    // 70000 = 0x00011170 (hand-computed: 65536 + 4464): shows the word order matters.
    assert_eq!(
        decode(&[0x0001, 0x1170], DataType::U32, Order::Abcd),
        70_000.0
    );
    assert_eq!(
        decode(&[0x1170, 0x0001], DataType::U32, Order::Cdab),
        70_000.0
    );
    // -123456789 = 0xF8A432EB (two's complement of 0x075BCD15, hand-computed).
    assert_eq!(
        decode(&[0xF8A4, 0x32EB], DataType::I32, Order::Abcd),
        -123_456_789.0
    );
    assert_eq!(
        decode(&[0x32EB, 0xF8A4], DataType::I32, Order::Cdab),
        -123_456_789.0
    );
    assert_eq!(
        decode(&[0xF8A4, 0x32EB], DataType::U32, Order::Abcd),
        4_171_510_507.0
    );
    // i32 -1 = 0xFFFFFFFF reads the same in every order.
    for order in Order::ALL {
        assert_eq!(decode(&[0xFFFF, 0xFFFF], DataType::I32, order), -1.0);
    }
}

#[test]
fn f64_values() {
    // -2.5 as IEEE 754 double, computed by hand: sign 1, exponent 1 + 1023 = 0x400, fraction
    // 0.25 → 0x4_0000_0000_0000, so 0xC004_0000_0000_0000.
    assert_eq!(decode(&[0xC004, 0, 0, 0], DataType::F64, Order::Abcd), -2.5);
    // 123.456 as IEEE 754 double = 0x405EDD2F1A9FBE77 (computed here with Python's
    // struct.pack('>d', 123.456)).
    let cases = [
        (Order::Abcd, [0x405E, 0xDD2F, 0x1A9F, 0xBE77]),
        (Order::Cdab, [0xBE77, 0x1A9F, 0xDD2F, 0x405E]),
        (Order::Badc, [0x5E40, 0x2FDD, 0x9F1A, 0x77BE]),
        (Order::Dcba, [0x77BE, 0x9F1A, 0x2FDD, 0x5E40]),
    ];
    for (order, words) in cases {
        assert_eq!(decode(&words, DataType::F64, order), 123.456, "{order}");
        assert_eq!(encode(123.456, DataType::F64, order).unwrap(), words);
    }
}

#[test]
fn bool_reads_zero_or_one() {
    assert_eq!(decode(&[0], DataType::Bool, Order::Abcd), 0.0);
    assert_eq!(decode(&[1], DataType::Bool, Order::Dcba), 1.0);
}

#[test]
fn encode_round_trips_and_refuses_what_does_not_fit() {
    for order in Order::ALL {
        for (v, t) in [
            (-1.0, DataType::I16),
            (65535.0, DataType::U16),
            (-2_147_483_648.0, DataType::I32),
            (4_294_967_295.0, DataType::U32),
            (-2.5, DataType::F32),
            (std::f64::consts::PI, DataType::F64),
        ] {
            let words = encode(v, t, order).unwrap();
            assert_eq!(words.len(), usize::from(t.register_count()));
            assert_eq!(decode(&words, t, order), v, "{t} {order}");
        }
    }
    assert!(encode(65536.0, DataType::U16, Order::Abcd).is_err());
    assert!(encode(-1.0, DataType::U32, Order::Abcd).is_err());
    assert!(encode(1.5, DataType::I16, Order::Abcd).is_err());
    assert!(encode(1e300, DataType::F32, Order::Abcd).is_err());
    assert!(encode(2.0, DataType::Bool, Order::Abcd).is_err());
}

#[test]
#[should_panic(expected = "f32 takes 2 registers")]
fn decode_rejects_wrong_length() {
    decode(&[0x42F6], DataType::F32, Order::Abcd);
}

#[test]
fn register_counts() {
    assert_eq!(DataType::Bool.register_count(), 1);
    assert_eq!(DataType::U16.register_count(), 1);
    assert_eq!(DataType::I16.register_count(), 1);
    assert_eq!(DataType::U32.register_count(), 2);
    assert_eq!(DataType::I32.register_count(), 2);
    assert_eq!(DataType::F32.register_count(), 2);
    assert_eq!(DataType::F64.register_count(), 4);
}

#[test]
fn order_parts_and_names() {
    for order in Order::ALL {
        assert_eq!(Order::new(order.word(), order.byte()), order);
        assert_eq!(order.as_str().parse::<Order>().unwrap(), order);
        assert_eq!(
            order.as_str().to_lowercase().parse::<Order>().unwrap(),
            order
        );
    }
    assert_eq!(Order::Cdab.word(), WordOrder::LittleEndian);
    assert_eq!(Order::Badc.byte(), ByteOrder::Swapped);
    assert!("ACBD".parse::<Order>().is_err());
}

#[test]
fn addresses_are_zero_based_protocol_addresses() {
    assert_eq!(Address::parse(0).unwrap().get(), 0);
    assert_eq!(Address::parse(65535).unwrap().get(), 65535);
    // Reference notation is not reinterpreted: 40001 stays protocol address 40001, not
    // holding register 1 (REFERENCES.md 7c: the 4xxxx form is a convention outside the spec).
    assert_eq!(Address::parse(40001).unwrap().get(), 40001);
    // Out of range, including the six-digit reference form; the message names the form.
    for bad in [-1, 65536, 400001] {
        let err = Address::parse(bad).unwrap_err();
        assert_eq!(err, RegisterError::AddressOutOfRange(bad));
        assert!(err.to_string().contains("0-based protocol address 0-65535"));
    }
}

#[test]
fn spans_must_fit_in_the_address_space() {
    let t = Table::HoldingRegisters;
    assert_eq!(Address::new(65534).last_of(2, t).unwrap().get(), 65535);
    let err = Address::new(65535).last_of(2, t).unwrap_err();
    assert!(
        err.to_string().contains("run past the last address 65535"),
        "{err}"
    );
    assert!(
        Source::new(
            t,
            Address::new(65533),
            DataType::F64,
            Order::Abcd,
            Scaling::IDENTITY
        )
        .is_err()
    );
}

#[test]
fn tables_and_types() {
    assert_eq!(Table::Coils.read_function_code(), 1);
    assert_eq!(Table::DiscreteInputs.read_function_code(), 2);
    assert_eq!(Table::HoldingRegisters.read_function_code(), 3);
    assert_eq!(Table::InputRegisters.read_function_code(), 4);
    assert!(Table::Coils.check(DataType::Bool).is_ok());
    assert!(Table::Coils.check(DataType::U16).is_err());
    assert!(Table::InputRegisters.check(DataType::Bool).is_err());
    assert!(Table::InputRegisters.check(DataType::F64).is_ok());
}

#[test]
fn scaling() {
    let s = Scaling::linear(0.1, -40.0).unwrap();
    assert!((s.apply(650.0) - 25.0).abs() < 1e-12);
    // 4-20 mA as 0..27648 raw counts onto 0..150 °C: midpoint 13824 → 75.
    let r = Scaling::range(0.0, 27648.0, 0.0, 150.0).unwrap();
    assert_eq!(r.apply(13824.0), 75.0);
    assert_eq!(r.apply(0.0), 0.0);
    assert_eq!(r.apply(27648.0), 150.0);
    // A reversed range works and values outside are extrapolated, not clamped.
    let rev = Scaling::range(0.0, 100.0, 100.0, 0.0).unwrap();
    assert_eq!(rev.apply(25.0), 75.0);
    assert_eq!(rev.apply(110.0), -10.0);
    assert_eq!(Scaling::default().apply(3.5), 3.5);
    assert!(Scaling::linear(0.0, 1.0).is_err());
    assert!(Scaling::linear(f64::NAN, 0.0).is_err());
    assert!(Scaling::range(5.0, 5.0, 0.0, 1.0).is_err());
    assert!(Scaling::range(0.0, 1.0, 2.0, 2.0).is_err());
    assert!(Scaling::range(0.0, f64::INFINITY, 0.0, 1.0).is_err());
}

#[test]
fn raw_for_undoes_apply() {
    // A 0-27648 count for 0-150 °C: 50 °C is a third of the count.
    let range = Scaling::range(0.0, 27_648.0, 0.0, 150.0).unwrap();
    assert_eq!(range.raw_for(50.0), 9_216.0);
    let linear = Scaling::linear(0.1, -5.0).unwrap();
    assert_eq!(linear.raw_for(20.0), 250.0);
    for s in [range, linear, Scaling::IDENTITY] {
        for eng in [-3.5, 0.0, 72.25] {
            assert!((s.apply(s.raw_for(eng)) - eng).abs() < 1e-9, "{s:?} {eng}");
        }
    }
}

#[test]
fn source_value_decodes_and_scales() {
    let src = Source::new(
        Table::InputRegisters,
        Address::new(10),
        DataType::I16,
        Order::Abcd,
        Scaling::linear(0.1, 0.0).unwrap(),
    )
    .unwrap();
    assert_eq!(src.count(), 1);
    // i16 0xFF9C = -100 (hand-computed two's complement) × 0.1 = -10.
    assert!((src.value(&[0xFF9C]) + 10.0).abs() < 1e-12);
}

#[test]
fn names_deserialize() {
    #[derive(Deserialize)]
    struct T {
        table: Table,
        address: Address,
        data_type: DataType,
        order: Order,
    }
    let t: T = serde_json::from_str(
        r#"{"table":"holding_registers","address":107,"data_type":"f32","order":"CDAB"}"#,
    )
    .unwrap();
    assert_eq!(t.table, Table::HoldingRegisters);
    assert_eq!(t.address, Address::new(107));
    assert_eq!(t.data_type, DataType::F32);
    assert_eq!(t.order, Order::Cdab);
    let err = serde_json::from_str::<T>(
        r#"{"table":"coils","address":400001,"data_type":"bool","order":"ABCD"}"#,
    )
    .err()
    .unwrap();
    assert!(err.to_string().contains("out of range"), "{err}");
}
