//! Modbus as pure logic: the data objects and value encodings a register map uses (data
//! types, word order, scale) and the application protocol's frames (function codes,
//! exception codes and their meanings, request and response PDUs, RTU framing with its
//! CRC-16, the TCP MBAP header), after the Modbus Application Protocol Specification V1.1b3
//! and the Modbus over Serial Line Specification V1.02. No I/O: the bench's client driver and
//! the simulator's server use these.

mod device_id;
mod frame;
mod values;

pub use device_id::{
    answer_device_id, device_id_request, device_id_response, device_object_name,
    parse_device_id_response, DeviceId, DeviceIdError, ReadDeviceIdCode, FC_ENCAPSULATED_INTERFACE,
    MEI_READ_DEVICE_ID,
};
pub use frame::{
    crc16, exception_meaning, function_name, mbap_frame, mbap_split, parse_request, rtu_frame,
    rtu_request_len, BadHeader, Exception, MbapFrame, Request, Response, FC_READ_COILS,
    FC_READ_DISCRETE_INPUTS, FC_READ_HOLDING_REGISTERS, FC_READ_INPUT_REGISTERS,
    FC_WRITE_MULTIPLE_COILS, FC_WRITE_MULTIPLE_REGISTERS, FC_WRITE_SINGLE_COIL,
    FC_WRITE_SINGLE_REGISTER,
};
pub use values::{DataType, Encoding, ObjectKind, ValueError, WordOrder};
