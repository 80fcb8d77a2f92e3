<?xml version="1.0" encoding="UTF-8"?>
<StyledLayerDescriptor version="1.0.0" xmlns="http://www.opengis.net/sld" xmlns:ogc="http://www.opengis.net/ogc" xmlns:xlink="http://www.w3.org/1999/xlink" xmlns:xsi="http://www.w3.org/2001/XMLSchema-instance" xsi:schemaLocation="http://www.opengis.net/sld http://schemas.opengis.net/sld/1.0.0/StyledLayerDescriptor.xsd">
  <NamedLayer>
    <Name>arrival_front</Name>
    <UserStyle>
      <Name>arrival_front</Name>
      <Title>Arrival time: front (long-wave speed, earliest arrival)</Title>
      <Abstract>Planning aid only, not a tsunami warning. Official warning centres and local emergency management decide. Arrival times only: wave heights and flooding are not computed.</Abstract>
      <FeatureTypeStyle>
        <Rule>
          <Name>arrival_minutes</Name>
          <Title>Arrival time: front (long-wave speed, earliest arrival)</Title>
          <RasterSymbolizer>
            <Opacity>1.0</Opacity>
            <ColorMap>
              <ColorMapEntry color="#000000" quantity="-9999" opacity="0" label="no data" />
              <ColorMapEntry color="#fde725" quantity="0" opacity="1" label="0:00" />
              <ColorMapEntry color="#b5de2b" quantity="2" opacity="1" label="0:02" />
              <ColorMapEntry color="#6ece58" quantity="4" opacity="1" label="0:04" />
              <ColorMapEntry color="#35b779" quantity="6" opacity="1" label="0:06" />
              <ColorMapEntry color="#1f9e89" quantity="8" opacity="1" label="0:08" />
              <ColorMapEntry color="#26828e" quantity="10" opacity="1" label="0:10" />
              <ColorMapEntry color="#31688e" quantity="12" opacity="1" label="0:12" />
              <ColorMapEntry color="#3e4989" quantity="14" opacity="1" label="0:14" />
              <ColorMapEntry color="#482878" quantity="16" opacity="1" label="0:16" />
              <ColorMapEntry color="#440154" quantity="18" opacity="1" label="0:18" />
            </ColorMap>
          </RasterSymbolizer>
        </Rule>
      </FeatureTypeStyle>
    </UserStyle>
  </NamedLayer>
</StyledLayerDescriptor>
