/*
 * The Sparkplug B payload schema as a protobufjs JSON descriptor.
 *
 * Source: Eclipse Tahu, sparkplug_b/sparkplug_b.proto (github.com/eclipse/tahu, the revision with the
 * top-level `enum DataType` including the array types 22–34, commit 46f25e79f34234e6145d11108660dfd9133ae50d),
 * which is the schema printed in the Eclipse Sparkplug 3.0.0 specification, section 6.4.1 "Google
 * Protocol Buffer Schema". That file is:
 *
 *   Copyright (c) 2015, 2018 Cirrus Link Solutions and others
 *   This program and the accompanying materials are made available under the terms of the Eclipse
 *   Public License 2.0 which is available at http://www.eclipse.org/legal/epl-2.0.
 *   SPDX-License-Identifier: EPL-2.0
 *
 * This descriptor is a transcription of that schema and stays under EPL-2.0 with the notice above.
 * What differs from the .proto, and why:
 * - Field names are camelCase (is_historical → isHistorical), as protobufjs names them by default;
 *   names never reach the wire, only the field numbers and types do, and those are unchanged.
 * - The one packable repeated scalar (DataSet.types) carries packed: false, because the .proto is
 *   proto2, where repeated scalars are not packed, while protobufjs descriptors default to packed.
 * - The extension ranges ("extensions N to max") are kept, so unknown extension fields are skipped
 *   on decoding instead of failing.
 * The package name org.eclipse.tahu.protobuf is kept, so the types carry the names other
 * implementations use.
 */

/** "max" in a .proto extension range: the largest field number protobuf allows (2^29 − 1). */
const MAX_FIELD = 536_870_911;

/** The DataType enum (Sparkplug 3.0, section 6.4.16 "Data Types"). */
export const SparkplugDataType = {
  Unknown: 0,
  Int8: 1,
  Int16: 2,
  Int32: 3,
  Int64: 4,
  UInt8: 5,
  UInt16: 6,
  UInt32: 7,
  UInt64: 8,
  Float: 9,
  Double: 10,
  Boolean: 11,
  String: 12,
  DateTime: 13,
  Text: 14,
  UUID: 15,
  DataSet: 16,
  Bytes: 17,
  File: 18,
  Template: 19,
  PropertySet: 20,
  PropertySetList: 21,
  Int8Array: 22,
  Int16Array: 23,
  Int32Array: 24,
  Int64Array: 25,
  UInt8Array: 26,
  UInt16Array: 27,
  UInt32Array: 28,
  UInt64Array: 29,
  FloatArray: 30,
  DoubleArray: 31,
  BooleanArray: 32,
  StringArray: 33,
  DateTimeArray: 34,
} as const;

export type SparkplugDataTypeName = keyof typeof SparkplugDataType;

const extensible = { fields: {}, extensions: [[1, MAX_FIELD]] };

export const sparkplugBDescriptor = {
  nested: {
    org: {
      nested: {
        eclipse: {
          nested: {
            tahu: {
              nested: {
                protobuf: {
                  nested: {
                    DataType: { values: SparkplugDataType },
                    Payload: {
                      fields: {
                        timestamp: { type: 'uint64', id: 1 },
                        metrics: { rule: 'repeated', type: 'Metric', id: 2 },
                        seq: { type: 'uint64', id: 3 },
                        uuid: { type: 'string', id: 4 },
                        body: { type: 'bytes', id: 5 },
                      },
                      extensions: [[6, MAX_FIELD]],
                      nested: {
                        Template: {
                          fields: {
                            version: { type: 'string', id: 1 },
                            metrics: { rule: 'repeated', type: 'Metric', id: 2 },
                            parameters: { rule: 'repeated', type: 'Parameter', id: 3 },
                            templateRef: { type: 'string', id: 4 },
                            isDefinition: { type: 'bool', id: 5 },
                          },
                          extensions: [[6, MAX_FIELD]],
                          nested: {
                            Parameter: {
                              oneofs: {
                                value: {
                                  oneof: [
                                    'intValue',
                                    'longValue',
                                    'floatValue',
                                    'doubleValue',
                                    'booleanValue',
                                    'stringValue',
                                    'extensionValue',
                                  ],
                                },
                              },
                              fields: {
                                name: { type: 'string', id: 1 },
                                type: { type: 'uint32', id: 2 },
                                intValue: { type: 'uint32', id: 3 },
                                longValue: { type: 'uint64', id: 4 },
                                floatValue: { type: 'float', id: 5 },
                                doubleValue: { type: 'double', id: 6 },
                                booleanValue: { type: 'bool', id: 7 },
                                stringValue: { type: 'string', id: 8 },
                                extensionValue: { type: 'ParameterValueExtension', id: 9 },
                              },
                              nested: { ParameterValueExtension: extensible },
                            },
                          },
                        },
                        DataSet: {
                          fields: {
                            numOfColumns: { type: 'uint64', id: 1 },
                            columns: { rule: 'repeated', type: 'string', id: 2 },
                            types: {
                              rule: 'repeated',
                              type: 'uint32',
                              id: 3,
                              options: { packed: false },
                            },
                            rows: { rule: 'repeated', type: 'Row', id: 4 },
                          },
                          extensions: [[5, MAX_FIELD]],
                          nested: {
                            DataSetValue: {
                              oneofs: {
                                value: {
                                  oneof: [
                                    'intValue',
                                    'longValue',
                                    'floatValue',
                                    'doubleValue',
                                    'booleanValue',
                                    'stringValue',
                                    'extensionValue',
                                  ],
                                },
                              },
                              fields: {
                                intValue: { type: 'uint32', id: 1 },
                                longValue: { type: 'uint64', id: 2 },
                                floatValue: { type: 'float', id: 3 },
                                doubleValue: { type: 'double', id: 4 },
                                booleanValue: { type: 'bool', id: 5 },
                                stringValue: { type: 'string', id: 6 },
                                extensionValue: { type: 'DataSetValueExtension', id: 7 },
                              },
                              nested: { DataSetValueExtension: extensible },
                            },
                            Row: {
                              fields: {
                                elements: { rule: 'repeated', type: 'DataSetValue', id: 1 },
                              },
                              extensions: [[2, MAX_FIELD]],
                            },
                          },
                        },
                        PropertyValue: {
                          oneofs: {
                            value: {
                              oneof: [
                                'intValue',
                                'longValue',
                                'floatValue',
                                'doubleValue',
                                'booleanValue',
                                'stringValue',
                                'propertysetValue',
                                'propertysetsValue',
                                'extensionValue',
                              ],
                            },
                          },
                          fields: {
                            type: { type: 'uint32', id: 1 },
                            isNull: { type: 'bool', id: 2 },
                            intValue: { type: 'uint32', id: 3 },
                            longValue: { type: 'uint64', id: 4 },
                            floatValue: { type: 'float', id: 5 },
                            doubleValue: { type: 'double', id: 6 },
                            booleanValue: { type: 'bool', id: 7 },
                            stringValue: { type: 'string', id: 8 },
                            propertysetValue: { type: 'PropertySet', id: 9 },
                            propertysetsValue: { type: 'PropertySetList', id: 10 },
                            extensionValue: { type: 'PropertyValueExtension', id: 11 },
                          },
                          nested: { PropertyValueExtension: extensible },
                        },
                        PropertySet: {
                          fields: {
                            keys: { rule: 'repeated', type: 'string', id: 1 },
                            values: { rule: 'repeated', type: 'PropertyValue', id: 2 },
                          },
                          extensions: [[3, MAX_FIELD]],
                        },
                        PropertySetList: {
                          fields: {
                            propertyset: { rule: 'repeated', type: 'PropertySet', id: 1 },
                          },
                          extensions: [[2, MAX_FIELD]],
                        },
                        MetaData: {
                          fields: {
                            isMultiPart: { type: 'bool', id: 1 },
                            contentType: { type: 'string', id: 2 },
                            size: { type: 'uint64', id: 3 },
                            seq: { type: 'uint64', id: 4 },
                            fileName: { type: 'string', id: 5 },
                            fileType: { type: 'string', id: 6 },
                            md5: { type: 'string', id: 7 },
                            description: { type: 'string', id: 8 },
                          },
                          extensions: [[9, MAX_FIELD]],
                        },
                        Metric: {
                          oneofs: {
                            value: {
                              oneof: [
                                'intValue',
                                'longValue',
                                'floatValue',
                                'doubleValue',
                                'booleanValue',
                                'stringValue',
                                'bytesValue',
                                'datasetValue',
                                'templateValue',
                                'extensionValue',
                              ],
                            },
                          },
                          fields: {
                            name: { type: 'string', id: 1 },
                            alias: { type: 'uint64', id: 2 },
                            timestamp: { type: 'uint64', id: 3 },
                            datatype: { type: 'uint32', id: 4 },
                            isHistorical: { type: 'bool', id: 5 },
                            isTransient: { type: 'bool', id: 6 },
                            isNull: { type: 'bool', id: 7 },
                            metadata: { type: 'MetaData', id: 8 },
                            properties: { type: 'PropertySet', id: 9 },
                            intValue: { type: 'uint32', id: 10 },
                            longValue: { type: 'uint64', id: 11 },
                            floatValue: { type: 'float', id: 12 },
                            doubleValue: { type: 'double', id: 13 },
                            booleanValue: { type: 'bool', id: 14 },
                            stringValue: { type: 'string', id: 15 },
                            bytesValue: { type: 'bytes', id: 16 },
                            datasetValue: { type: 'DataSet', id: 17 },
                            templateValue: { type: 'Template', id: 18 },
                            extensionValue: { type: 'MetricValueExtension', id: 19 },
                          },
                          nested: { MetricValueExtension: extensible },
                        },
                      },
                    },
                  },
                },
              },
            },
          },
        },
      },
    },
  },
} as const;

/** The full name of the top-level message, for Root.lookupType. */
export const PAYLOAD_TYPE_NAME = 'org.eclipse.tahu.protobuf.Payload';
