//! The jetloop gRPC API, package `jetloop.v1`.
//!
//! The `.proto` files under `proto/jetloop/v1/` are the source of truth; this crate exposes the
//! generated messages, clients and servers as [`pb`] and the encoded file descriptor set as
//! [`FILE_DESCRIPTOR_SET`] (used by server reflection).
#![forbid(unsafe_code)]

/// Generated code for package `jetloop.v1`.
pub mod pb {
    #![allow(missing_docs, clippy::all, clippy::pedantic)]
    tonic::include_proto!("jetloop.v1");
}

/// Encoded `google.protobuf.FileDescriptorSet` of every jetloop.v1 proto file.
pub const FILE_DESCRIPTOR_SET: &[u8] = include_bytes!(concat!(env!("OUT_DIR"), "/jetloop_v1_descriptor.bin"));

#[cfg(test)]
mod tests {
    use prost::Message;

    #[test]
    fn descriptor_set_decodes_and_names_every_service() {
        let fds = prost_types_shim::decode(super::FILE_DESCRIPTOR_SET);
        for svc in [
            "CalibrationService",
            "GasDynamicsService",
            "InfoService",
            "ShockCellService",
            "ToneService",
            "SpectrumService",
            "StagingService",
        ] {
            assert!(fds.contains(&svc.to_string()), "missing {svc}: {fds:?}");
        }
    }

    /// Minimal decoding of the descriptor set without pulling prost-types: walks
    /// FileDescriptorSet.file (1) -> FileDescriptorProto.service (6) -> name (1).
    mod prost_types_shim {
        use prost::Message;

        #[derive(Clone, PartialEq, Message)]
        struct Fds {
            #[prost(message, repeated, tag = "1")]
            file: Vec<Fdp>,
        }
        #[derive(Clone, PartialEq, Message)]
        struct Fdp {
            #[prost(string, optional, tag = "2")]
            package: Option<String>,
            #[prost(message, repeated, tag = "6")]
            service: Vec<Sdp>,
        }
        #[derive(Clone, PartialEq, Message)]
        struct Sdp {
            #[prost(string, optional, tag = "1")]
            name: Option<String>,
        }

        pub fn decode(bytes: &[u8]) -> Vec<String> {
            let fds = Fds::decode(bytes).expect("descriptor set decodes");
            fds.file
                .into_iter()
                .inspect(|f| assert_eq!(f.package.as_deref(), Some("jetloop.v1")))
                .flat_map(|f| f.service.into_iter().filter_map(|s| s.name))
                .collect()
        }
    }

    #[test]
    fn messages_round_trip() {
        let m = crate::pb::NormalShockRequest { gamma: Some(1.4), upstream_mach_number: 2.0 };
        let back = crate::pb::NormalShockRequest::decode(m.encode_to_vec().as_slice()).unwrap();
        assert_eq!(m, back);
    }
}
